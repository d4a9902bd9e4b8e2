"""Far-field (Fraunhofer) results against their closed forms, in absolute units."""

import math

import numpy as np
import pytest
from benchsetup import bench, centre_row

from compute import analytic, metrics, model
from compute.engine import compute

LAM = 6.328e-7


@pytest.fixture(scope="module")
def airy():
    d = 1e-3
    z = 40.0  # 12.6 Fraunhofer distances
    r1 = analytic.airy_first_zero(d, LAM, z)
    s = bench(model.Circle(diameter=d), distance=z, width=8 * r1, samples=401, irradiance=100.0)
    return s, compute(s, use_cache=False), d, z, float(r1)


def test_airy_first_zero(airy):
    # Born & Wolf, Principles of Optics, 7th ed., §8.5.2: first dark ring at
    # 1.21967 λz/D (first zero of J1 / π, scipy.special.jn_zeros).
    _, r, d, z, _r1 = airy
    x, cut = centre_row(r)
    mins = [m for m in metrics.minima(x, cut) if m > 0]
    assert mins, "no minimum found on the cut"
    assert mins[0] == pytest.approx(1.21967 * LAM * z / d, rel=0.01)


def test_airy_encircled_energy(airy):
    # Born & Wolf §8.5.2 (Rayleigh's formula 1 − J0² − J1²): 83.8 % of the power
    # falls inside the first dark ring.
    _, r, _d, _z, r1 = airy
    frac_window = metrics.encircled_energy(r.x, r.y, r.intensity, [r1], centre=(0.0, 0.0))[0]
    inside = frac_window * metrics.power(r.x, r.y, r.intensity)
    assert inside / r.power_in == pytest.approx(0.838, abs=0.005)


def test_airy_absolute_peak(airy):
    # Goodman, Introduction to Fourier Optics, 3rd ed., §4.4.2: I(0) = I0 (A/(λz))².
    _s, r, d, z, _ = airy
    area = math.pi * d**2 / 4
    expected = 100.0 * (area / (LAM * z)) ** 2
    assert r.intensity.max() == pytest.approx(expected, rel=0.01)
    assert r.method == "fraunhofer"


@pytest.fixture(scope="module")
def square():
    a = 2e-4
    z = 10.0
    zero = LAM * z / a
    s = bench(model.Rect(width=a, height=a), distance=z, width=7 * zero, height=zero, samples=701)
    return compute(s, use_cache=False), a, z, zero


def test_rect_zeros(square):
    # Hecht, Optics, 5th ed., §10.2.1: zeros of the single-slit pattern at m λz/a.
    r, _a, _z, zero = square
    x, cut = centre_row(r)
    mins = sorted(m for m in metrics.minima(x, cut) if m > 0)
    assert mins[0] == pytest.approx(zero, rel=0.01)
    assert mins[1] == pytest.approx(2 * zero, rel=0.01)


def test_rect_first_side_lobe(square):
    # Hecht, Optics, 5th ed., §10.2.1: the first side lobe of sinc² is 0.0472 of the peak.
    r, _a, _z, zero = square
    x, cut = centre_row(r)
    lobe = cut[(x > zero) & (x < 2 * zero)].max()
    assert lobe / cut.max() == pytest.approx(0.0472, rel=0.02)


def test_rect_whole_window_against_closed_form(square):
    # Goodman §4.4.1: I = I0 (A/λz)² sinc²(a x/λz) sinc²(a y/λz).
    r, a, z, _ = square
    ref = analytic.rect_fraunhofer(r.x[None, :], r.y[:, None], a, a, LAM, z, 100.0)
    assert np.max(np.abs(r.intensity - ref)) <= 0.005 * ref.max()


def test_grating_orders_against_closed_form():
    # Hecht, Optics, 5th ed., §10.2.3: N-slit pattern, single-slit envelope times
    # (sin Nβ / sin β)²; principal maxima at m λz/d.
    g = model.Grating(count=5, period=1e-4, width=3e-5, height=1e-3)
    z = 20.0
    s = bench(g, distance=z, width=0.4, height=0.01, samples=2001)
    r = compute(s, use_cache=False)
    ref = analytic.grating_fraunhofer(
        r.x[None, :], r.y[:, None], 5, 1e-4, 3e-5, 1e-3, LAM, z, 100.0
    )
    _x, cut = centre_row(r)
    j = int(np.argmin(np.abs(r.y)))
    assert np.max(np.abs(cut - ref[j])) <= 0.01 * ref.max()


def test_babinet_wire_matches_slit_away_from_beam():
    # Born & Wolf, Principles of Optics, 7th ed., §8.3.3 (Babinet's principle): outside
    # the unobstructed beam, a wire and a slit of the same width diffract alike.
    common = {
        "kind": "gaussian",
        "waist": 2e-3,
        "power": 1e-3,
        "distance": 5.0,
        "width": 0.06,
        "height": 0.002,
    }
    wire_w = 1e-4
    slit = compute(bench(model.Rect(width=wire_w, height=0.03), samples=601, **common))
    wire = compute(
        bench(
            model.Rect(width=wire_w, height=0.03, transmission=0.0),
            background="clear",
            samples=601,
            **common,
        )
    )
    # The same wire painted by hand over a large opening, without Babinet's split.
    painted = compute(
        bench(
            model.Rect(width=0.03, height=0.03),
            model.Rect(width=wire_w, height=0.03, transmission=0.0),
            samples=601,
            **common,
        )
    )
    x, i_slit = centre_row(slit)
    _, i_wire = centre_row(wire)
    _, i_painted = centre_row(painted)
    far = np.abs(x) > 0.012  # > 5 beam radii at 5 m
    scale = i_slit[far].max()
    assert np.max(np.abs(i_wire[far] - i_slit[far])) <= 0.01 * scale
    assert np.max(np.abs(i_painted[far] - i_slit[far])) <= 0.02 * scale
    # Inside the beam the wire's shadow is the beam minus the slit field: not the slit.
    assert i_wire[~far].max() > 10 * i_slit[~far].max()
