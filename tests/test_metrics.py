"""compute.metrics against synthetic patterns built from compute.analytic.

Each physics check names its source beside it. Book section numbers are given as
recalled from memory of the cited editions. The settings are our own.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from scipy import optimize

from compute import analytic as an
from compute import metrics as me
from compute.grids import Grid

LAM = 632.8e-9  # m
I0 = 40.0  # W/m²


def _gaussian(w, pixels_per_w, n=(161, 121), centre=(0.0, 0.0), power=2e-3):
    """A sampled Gaussian beam at its waist, on a grid of ``w / pixels_per_w`` pitch."""
    pitch = w / pixels_per_w
    g = Grid(nx=n[0], ny=n[1], dx=pitch, dy=pitch)
    xx, yy = np.meshgrid(g.x, g.y)
    irr = an.gaussian_beam(np.hypot(xx - centre[0], yy - centre[1]), 0.0, w, LAM, power)
    return g, irr.irradiance


def _airy(d, z, pixels_per_ring, rings=12):
    r1 = an.airy_first_zero(d, LAM, z)
    pitch = r1 / pixels_per_ring
    n = 2 * int(rings * pixels_per_ring) + 1
    g = Grid(nx=n, ny=n, dx=pitch, dy=pitch)
    xx, yy = np.meshgrid(g.x, g.y)
    return g, an.circle_fraunhofer(np.hypot(xx, yy), d, LAM, z, I0), r1


def _slit(w, z, pitch, nx=1601, ny=5, height=2e-3):
    g = Grid(nx=nx, ny=ny, dx=pitch, dy=pitch)
    return g, an.rect_fraunhofer(g.x[None, :], g.y[:, None], w, height, LAM, z, I0)


# -------------------------------------------------------------------- peak, power


def test_power_of_a_sampled_gaussian_is_its_power():
    g, irr = _gaussian(0.5e-3, 8, centre=(3e-5, -1e-5), power=2e-3)
    # Siegman, Lasers (1986), §17.1: ∫ 2P/(πw²) exp(−2r²/w²) dA = P
    assert me.power(g.x, g.y, irr) == pytest.approx(2e-3, rel=1e-9)


def test_power_on_an_uneven_grid_uses_cell_areas():
    x = np.concatenate([np.linspace(-3e-3, 0, 31), np.linspace(0.05e-3, 3e-3, 120)])
    y = np.linspace(-3e-3, 3e-3, 141)
    w = 0.6e-3
    irr = an.gaussian_beam(np.hypot(x[None, :], y[:, None]), 0.0, w, LAM, 1e-3).irradiance
    # Siegman §17.1 (∫ I dA = P); the midpoint cells make it a second-order sum
    assert me.power(x, y, irr) == pytest.approx(1e-3, rel=2e-3)


def test_peak_position_is_refined_below_a_pixel():
    w = 0.4e-3
    pitch = w / 10
    centre = (0.37 * pitch, -0.21 * pitch)
    g, irr = _gaussian(w, 10, centre=centre)
    top = me.peak(g.x, g.y, irr)
    # the maximum of a Gaussian is at its centre (Siegman §17.1); parabolic refinement
    # recovers it to a small fraction of a pixel (common practice, no source)
    assert abs(top["x"] - centre[0]) < 0.01 * pitch
    assert abs(top["y"] - centre[1]) < 0.01 * pitch
    assert top["value"] == pytest.approx(irr.max())
    assert top["value"] <= 2 * 2e-3 / (np.pi * w**2)


def test_peak_of_a_flat_or_empty_pattern_has_no_position():
    x, y = np.linspace(0, 1e-3, 5), np.linspace(0, 1e-3, 4)
    for value in (0.0, 3.0):
        top = me.peak(x, y, np.full((4, 5), value))
        assert top == {"value": value, "x": None, "y": None}


# ------------------------------------------------------------------------- widths


@pytest.mark.parametrize("offset", [0.0, 0.31, 0.5])
def test_fwhm_of_a_gaussian(offset):
    w = 1e-3
    pitch = w / 20
    g, irr = _gaussian(w, 20, n=(201, 3), centre=(offset * pitch, 0.0))
    coord, values = me.cut(g.x, g.y, irr, "x", 0.0)
    # exp(−2x²/w²) falls to half at x = w √(ln 2 / 2): FWHM = √(2 ln 2) w (Siegman §17.1)
    assert me.fwhm(coord, values) == pytest.approx(math.sqrt(2 * math.log(2)) * w, rel=2e-3)


def test_fwhm_of_a_slit_pattern_against_the_half_power_points():
    w, z = 80e-6, 1.0
    lz = LAM * z
    g, irr = _slit(w, z, pitch=lz / w / 25)
    coord, values = me.cut(g.x, g.y, irr, "x", 0.0)
    # half-maximum of sinc² solved independently (Hecht 5th ed. §10.2.1, sinc² profile)
    u_half = optimize.brentq(lambda u: np.sinc(u) ** 2 - 0.5, 0.1, 0.9)
    assert me.fwhm(coord, values) == pytest.approx(2 * u_half * lz / w, rel=2e-3)


def test_fwhm_is_none_when_the_peak_does_not_fall_to_half():
    x = np.linspace(-1, 1, 11)
    assert me.fwhm(x, 1 + 0.1 * np.cos(x)) is None
    assert me.fwhm(x, np.zeros(11)) is None
    assert me.fwhm(x, np.exp(-x)) is None  # maximum on the edge


def test_d4sigma_of_a_gaussian_is_twice_its_radius():
    wx, wy = 0.8e-3, 0.5e-3
    pitch = 0.05e-3
    g = Grid(nx=241, ny=181, dx=pitch, dy=pitch, cx=1e-4)
    x0, y0 = 1.3e-4, -0.4e-4
    irr = (
        2e-3
        / (np.pi * wx * wy / 2)
        * np.exp(-2 * (g.x[None, :] - x0) ** 2 / wx**2 - 2 * (g.y[:, None] - y0) ** 2 / wy**2)
    )
    dx, dy = me.d4sigma(g.x, g.y, irr)
    # ISO 11146-1 second-moment width of a Gaussian: D4σ = 2w (Siegman §17.1, σ = w/2)
    assert dx == pytest.approx(2 * wx, rel=1e-6)
    assert dy == pytest.approx(2 * wy, rel=1e-6)


# ------------------------------------------------------------------------- minima


def test_minima_of_a_slit_pattern_are_at_m_lambda_z_over_w():
    w, z = 60e-6, 1.5
    lz = LAM * z
    pitch = lz / w / 9.7  # not commensurate with the zeros
    g, irr = _slit(w, z, pitch, nx=901)
    coord, values = me.cut(g.x, g.y, irr, "x", 0.0)
    found = me.minima(coord, values, order="abs")
    expected = an.slit_zeros(w, LAM, z, 6)  # Hecht 5th ed. §10.2.1: x_m = m λz/w
    pos, neg = found[found > 0][:6], -found[found < 0][:6]
    np.testing.assert_allclose(pos, expected, atol=0.02 * pitch)
    np.testing.assert_allclose(neg, expected, atol=0.02 * pitch)
    # sorted by distance from the axis, alternating sides symmetrically
    assert np.all(np.diff(np.abs(found)) >= -1e-12 * pitch)
    assert np.all(np.diff(me.minima(coord, values)) > 0)


def test_minima_ignore_noise_and_shallow_ripples():
    w, z = 60e-6, 1.5
    lz = LAM * z
    g, irr = _slit(w, z, lz / w / 12, nx=401)
    coord, clean = me.cut(g.x, g.y, irr, "x", 0.0)
    rng = np.random.default_rng(3)
    noisy = clean + 1e-9 * clean.max() * rng.random(clean.size)
    assert me.minima(coord, noisy).size == me.minima(coord, clean).size > 0
    # a 1 % ripple on a smooth hump is no dark fringe (common practice, no source)
    x = np.linspace(-1e-3, 1e-3, 801)
    hump = np.exp(-(x**2) / (0.4e-3) ** 2) * (1 + 0.01 * np.cos(2 * np.pi * x / 0.05e-3))
    assert me.minima(x, hump).size == 0
    assert me.minima(x, np.zeros_like(x)).size == 0


def test_central_lobe_of_a_slit_is_two_lambda_z_over_w():
    w, z = 90e-6, 2.0
    lz = LAM * z
    g, irr = _slit(w, z, lz / w / 15.3, nx=601)
    coord, values = me.cut(g.x, g.y, irr, "x", 0.0)
    # Hecht 5th ed. §10.2.1: the central maximum spans the first zeros ±λz/w
    assert me.central_lobe_width(coord, values) == pytest.approx(2 * lz / w, rel=1e-3)


def test_central_lobe_of_the_airy_pattern():
    d, z = 1e-3, 1.0
    g, irr, r1 = _airy(d, z, pixels_per_ring=12.3, rings=4)
    coord, values = me.cut(g.x, g.y, irr, "x", 0.0)
    # Born & Wolf 7th ed. §8.5.2: first dark ring at 1.21967 λz/D
    assert me.central_lobe_width(coord, values) == pytest.approx(2 * r1, rel=1e-3)


def test_central_lobe_is_none_without_dark_fringes():
    g, irr = _gaussian(0.5e-3, 8)
    coord, values = me.cut(g.x, g.y, irr, "x", 0.0)
    assert me.central_lobe_width(coord, values) is None


# --------------------------------------------------------------- encircled energy


def test_encircled_energy_of_a_sampled_airy_pattern():
    d, z = 1e-3, 1.0
    g, irr, r1 = _airy(d, z, pixels_per_ring=12)
    radii = np.array([0.5, 0.8, 1.0, 1.4, 1.6393, 2.2, 2.679, 3.5]) * r1
    frac = me.encircled_energy(g.x, g.y, irr, radii, centre=(0.0, 0.0))
    # the window holds only part of the pattern: scale to the power through the aperture
    window = me.power(g.x, g.y, irr)
    through = I0 * np.pi * d**2 / 4
    # Rayleigh's formula 1 − J0² − J1², Born & Wolf 7th ed. §8.5.2
    expected = an.circle_encircled_energy(radii, d, LAM, z)
    np.testing.assert_allclose(frac * window / through, expected, rtol=5e-3)
    # the centroid of the symmetric pattern is its centre
    np.testing.assert_allclose(me.encircled_energy(g.x, g.y, irr, radii), frac, rtol=1e-9)
    # 83.8 % within the first dark ring, Born & Wolf §8.5.2
    first = me.encircled_energy(g.x, g.y, irr, r1) * window / through
    assert first == pytest.approx(0.838, abs=2e-3)


def test_encircled_energy_weights_cut_pixels_by_their_exact_overlap():
    g = Grid(nx=40, ny=30, dx=1e-5, dy=1e-5)
    uniform = np.full(g.shape, 7.0)
    centre = (0.123e-5, -0.377e-5)
    radii = np.linspace(0, 1.4e-4, 57)
    frac = me.encircled_energy(g.x, g.y, uniform, radii, centre=centre)
    # area of a disc πr² over the window area (common practice, no source)
    window = 40 * 30 * 1e-10
    np.testing.assert_allclose(frac, np.pi * radii**2 / window, rtol=1e-12, atol=1e-15)
    assert frac.shape == radii.shape
    # a disc larger than the window holds all of it; the fraction never decreases
    assert me.encircled_energy(g.x, g.y, uniform, 1.0)[()] == pytest.approx(1.0, rel=1e-12)
    dense = me.encircled_energy(g.x, g.y, uniform, np.linspace(0, 3e-4, 400), centre=centre)
    assert np.all(np.diff(dense) >= -1e-15)


def test_encircled_energy_of_a_gaussian_against_its_closed_form():
    w = 0.5e-3
    g, irr = _gaussian(w, 12, n=(121, 121), centre=(0.2e-4, 0.1e-4))
    radii = np.array([0.5, 0.7, 1.0, 1.5, 2.0]) * w
    frac = me.encircled_energy(g.x, g.y, irr, radii)
    # Siegman, Lasers (1986), §17.1: power within r is 1 − exp(−2r²/w²)
    np.testing.assert_allclose(frac, 1 - np.exp(-2 * radii**2 / w**2), rtol=3e-3)


def test_encircled_energy_rejects_negative_radii():
    g, irr = _gaussian(0.5e-3, 6)
    with pytest.raises(ValueError, match="radii"):
        me.encircled_energy(g.x, g.y, irr, [-1e-4, 1e-4])


# --------------------------------------------------------------------- visibility


def test_visibility_of_two_beam_fringes():
    period = 0.2e-3
    x = np.arange(400) * period / 40  # ten periods, samples on the extrema
    for v in (1.0, 0.62, 0.1):
        fringes = I0 * (1 + v * np.cos(2 * np.pi * x / period))
        # two-beam interference I = I0 (1 + V cos φ), Michelson's visibility
        # (Born & Wolf 7th ed., ch. 7); V is recovered exactly
        assert me.visibility(fringes) == pytest.approx(v, rel=1e-12)
    assert me.visibility(np.zeros(5)) is None
    assert me.visibility(np.full(5, 3.0)) == 0.0


def test_local_visibility_follows_a_varying_contrast():
    period = 0.02e-3
    x = np.linspace(-2e-3, 2e-3, 8001)  # 40 samples a period
    contrast = np.exp(-(x**2) / (2e-3) ** 2)  # changes < 1 % over one period
    fringes = I0 * (1 + contrast * np.cos(2 * np.pi * x / period))
    for at in (-1.5e-3, -0.4e-3, 0.0, 0.9e-3):
        expected = math.exp(-(at**2) / (2e-3) ** 2)
        # Born & Wolf 7th ed., ch. 7 (visibility of a slowly varying fringe envelope)
        assert me.local_visibility(x, fringes, at, period) == pytest.approx(expected, rel=1e-2)
    assert me.local_visibility(x, fringes, 5e-3, period) is None  # outside the cut
    with pytest.raises(ValueError, match="period"):
        me.local_visibility(x, fringes, 0.0, -1.0)


def test_young_fringes_have_full_visibility_near_the_axis():
    z, period, width = 1.0, 0.25e-3, 30e-6
    lz = LAM * z
    x = np.linspace(-2 * lz / period, 2 * lz / period, 2001)
    irr = an.grating_fraunhofer(x, 0.0, 2, period, width, 1e-3, LAM, z, I0)
    # Hecht 5th ed. §9.3: two equal slits give dark fringes of zero irradiance (V = 1)
    assert me.local_visibility(x, irr, 0.5 * lz / period, lz / period) == pytest.approx(
        1.0, abs=1e-5
    )


# -------------------------------------------------------------------- cut, summary


def test_cut_takes_the_row_or_column_nearest_the_position():
    x = np.linspace(-1e-3, 1e-3, 5)
    y = np.linspace(0, 3e-3, 4)
    irr = np.arange(20.0).reshape(4, 5)
    coord, values = me.cut(x, y, irr, "x", 1.9e-3)  # nearest row y = 2e-3
    np.testing.assert_array_equal(coord, x)
    np.testing.assert_array_equal(values, irr[2])
    coord, values = me.cut(x, y, irr, "y", -0.7e-3)  # nearest column x = -0.5e-3
    np.testing.assert_array_equal(coord, y)
    np.testing.assert_array_equal(values, irr[:, 1])
    values[:] = -1
    assert irr[0, 1] == 1.0  # a copy, never a view
    with pytest.raises(ValueError, match="axis"):
        me.cut(x, y, irr, "z", 0.0)


def test_descending_axes_give_the_same_numbers():
    g, irr = _gaussian(0.3e-3, 7, centre=(2e-5, 1e-5))
    ascending = me.summary(g.x, g.y, irr)
    descending = me.summary(g.x[::-1], g.y[::-1], irr[::-1, ::-1])
    assert descending.keys() == ascending.keys()
    for key, value in ascending.items():
        if value is None:
            assert descending[key] is None, key
        else:
            assert descending[key] == pytest.approx(value, rel=1e-9), key


def test_summary_of_a_slit_pattern():
    w, h, z = 70e-6, 0.5e-3, 1.0
    lz = LAM * z
    g = Grid(nx=801, ny=201, dx=lz / w / 20, dy=lz / h / 20)
    irr = an.rect_fraunhofer(g.x[None, :], g.y[:, None], w, h, LAM, z, I0)
    s = me.summary(g.x, g.y, irr)
    json.dumps(s, allow_nan=False)
    assert all(v is None or type(v) is float for v in s.values())
    # Goodman 3rd ed. §4.4.1: peak (A/(λz))² I0 on the axis
    assert s["peak"] == pytest.approx(I0 * (w * h / lz) ** 2, rel=1e-12)
    assert abs(s["peak_x"]) < 1e-12 and abs(s["peak_y"]) < 1e-12
    # Hecht 5th ed. §10.2.1: central lobes 2λz/w and 2λz/h
    assert s["central_lobe_x"] == pytest.approx(2 * lz / w, rel=1e-3)
    assert s["central_lobe_y"] == pytest.approx(2 * lz / h, rel=1e-3)
    assert s["visibility_x"] == pytest.approx(1.0, abs=1e-9)
    assert s["power"] == pytest.approx(me.power(g.x, g.y, irr))
    assert s["fwhm_x"] == pytest.approx(me.fwhm(*me.cut(g.x, g.y, irr, "x", 0.0)))
    assert (s["d4sigma_x"], s["d4sigma_y"]) == me.d4sigma(g.x, g.y, irr)


# --------------------------------------------------------------------- robustness

DEGENERATE = {
    "single pixel": (np.array([0.0]), np.array([0.0]), np.array([[2.0]])),
    "single row": (np.linspace(0, 1e-3, 9), np.array([0.0]), np.ones((1, 9))),
    "single column": (np.array([0.0]), np.linspace(0, 1e-3, 9), np.ones((9, 1))),
    "all zero": (np.linspace(0, 1e-3, 6), np.linspace(0, 1e-3, 4), np.zeros((4, 6))),
    "flat": (np.linspace(0, 1e-3, 6), np.linspace(0, 1e-3, 4), np.full((4, 6), 5.0)),
    "sums beyond float range": (
        np.linspace(0, 50.0, 6),
        np.linspace(0, 30.0, 4),
        np.full((4, 6), 1e307) * np.arange(1, 7) / 6,
    ),
    "one hot pixel": (
        np.linspace(0, 1e-3, 6),
        np.linspace(0, 1e-3, 4),
        np.pad([[1.0]], ((1, 2), (3, 2))),
    ),
}


@pytest.mark.parametrize("name", list(DEGENERATE))
def test_degenerate_patterns_never_raise(name):
    x, y, irr = DEGENERATE[name]
    s = me.summary(x, y, irr)
    json.dumps(s, allow_nan=False)
    ee = me.encircled_energy(x, y, irr, [0.0, 1e-4, 1.0])
    assert ee is None or np.all(np.isfinite(ee))
    for axis in ("x", "y"):
        coord, values = me.cut(x, y, irr, axis, 0.0)
        me.minima(coord, values)
        me.local_visibility(coord, values, 0.0, 1e-4)
    if name == "all zero":
        assert s["power"] == 0.0 and s["peak_x"] is None and s["d4sigma_x"] is None
        assert ee is None
    if name == "single row":
        assert s["power"] is None and s["d4sigma_y"] is None
        assert s["d4sigma_x"] is not None
    if name == "sums beyond float range":
        assert s["power"] is None  # no float holds it
        assert s["d4sigma_x"] is not None and np.all(np.isfinite(ee))
    if name == "flat":
        assert s["fwhm_x"] is None and s["visibility_x"] == 0.0


@settings(max_examples=150, deadline=None)
@given(
    hnp.arrays(
        np.float64,
        hnp.array_shapes(min_dims=2, max_dims=2, min_side=1, max_side=9),
        elements=st.floats(0, 1e9, allow_subnormal=True),
    )
)
def test_any_non_negative_pattern_gives_json_ready_numbers(irr):
    ny, nx = irr.shape
    x = np.linspace(-1e-3, 1e-3, nx) if nx > 1 else np.zeros(1)
    y = np.linspace(-2e-3, 2e-3, ny) if ny > 1 else np.zeros(1)
    s = me.summary(x, y, irr)
    json.dumps(s, allow_nan=False)
    ee = me.encircled_energy(x, y, irr, [0.0, 5e-4, 1e-2])
    if ee is not None:
        assert np.all(np.isfinite(ee)) and np.all((ee >= -1e-12) & (ee <= 1 + 1e-12))
    coord, values = me.cut(x, y, irr, "x", 0.0)
    assert np.all(np.isfinite(me.minima(coord, values)))


@pytest.mark.parametrize(
    ("args", "word"),
    [
        ((np.arange(3.0), np.arange(2.0), np.zeros((3, 3))), "shape"),
        ((np.arange(3.0), np.arange(2.0), np.full((2, 3), np.nan)), "NaN"),
        ((np.array([0.0, 2.0, 1.0]), np.arange(2.0), np.ones((2, 3))), "increasing"),
        ((np.arange(3.0), np.arange(2.0), np.ones((2, 3)) * 1j), "complex"),
        ((np.arange(3.0), np.arange(2.0), np.ones(6)), "shape"),
        ((np.array([]), np.arange(2.0), np.ones((2, 0))), "non-empty"),
    ],
)
def test_invalid_arrays_are_refused_with_a_message(args, word):
    with pytest.raises(ValueError, match=word):
        me.summary(*args)


def test_minima_and_fwhm_check_their_cut():
    with pytest.raises(ValueError, match="shape"):
        me.fwhm(np.arange(4.0), np.ones(3))
    with pytest.raises(ValueError, match="order"):
        me.minima(np.arange(4.0), np.ones(4), order="size")
