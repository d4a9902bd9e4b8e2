"""The stated conventions: point-source power, tilts, what `intensity` is, screen pixels, rounding.

docs/snapshot.md ("Conventions") states each of them; these tests hold the code to it.
"""

import math

import numpy as np
import pytest
from benchsetup import bench

from compute import camera, model, sources
from compute.engine import compute

LAM = 6.328e-7


# ----------------------------------------------------------------------- point source


@pytest.mark.parametrize("tilt", [0.0, 0.3])
def test_point_source_spreads_its_power_isotropically(tilt):
    # An isotropic point source of power P: I = P/(4πρ²) at distance ρ, in every
    # direction (inverse-square law, common practice, no source).
    power, d, z = 2e-3, 0.1, 0.1
    # rays up to 45° off the axis
    s = bench(background="clear", distance=z, width=0.3, samples=31, kind="point", power=power)
    s.source.distance = d
    s.source.tilt_x = tilt
    r = compute(s, use_cache=False)
    xs = -d * math.tan(tilt)  # the source sits so that its ray to the origin has the tilt
    X, Y = np.meshgrid(r.x, r.y)
    rho2 = (X - xs) ** 2 + Y**2 + (d + z) ** 2
    np.testing.assert_allclose(r.intensity * 4 * math.pi * rho2, power, rtol=1e-12)
    # And on the aperture plane itself.
    inc = sources.incident_field(s.source, r.x, r.y)
    rho2 = (X - xs) ** 2 + Y**2 + d**2
    np.testing.assert_allclose(np.abs(inc) ** 2 * 4 * math.pi * rho2, power, rtol=1e-12)


# ----------------------------------------------------------------------------- tilts

THETA, Z, D = 0.05, 2.0, 0.5e-3
SIN_SHIFT, TAN_SHIFT = Z * math.sin(THETA), Z * math.tan(THETA)
TILT_TOL = 0.1 * (TAN_SHIFT - SIN_SHIFT)  # 12.5 µm: a tenth of the gap between the two


def _lobe_centre(r, axis):
    """Irradiance-weighted centre of the central lobe (above 5 % of the peak)."""
    X, Y = np.meshgrid(r.x, r.y)
    m = r.intensity > 0.05 * r.intensity.max()
    c = X if axis == 0 else Y
    return float((r.intensity[m] * c[m]).sum() / r.intensity[m].sum())


def _tilted_disk(method, **tilt):
    # The window is centred half-way between z·sin θ and z·tan θ (125 µm apart), so
    # the lobe has to move to one of them by itself.
    mid = 0.5 * (SIN_SHIFT + TAN_SHIFT)
    x = mid * math.copysign(1, tilt.get("tilt_x", 0.0)) if "tilt_x" in tilt else 0.0
    y = mid * math.copysign(1, tilt.get("tilt_y", 0.0)) if "tilt_y" in tilt else 0.0
    s = bench(
        model.Circle(diameter=D), distance=Z, width=6e-3, samples=32, x=x, y=y, method=method,
        **tilt,
    )  # fmt: skip
    return compute(s, use_cache=False)


@pytest.mark.parametrize(
    "tilt, axis, sign",
    [({"tilt_x": THETA}, 0, 1), ({"tilt_x": -THETA}, 0, -1), ({"tilt_y": THETA}, 1, 1)],
)
def test_a_positive_tilt_moves_the_paraxial_far_field_by_z_sin_theta(tilt, axis, sign):
    # tilt_x is an angle: the incident wave's direction cosine is α = sin(tilt_x), a
    # carrier exp(ikαx) (Goodman, Introduction to Fourier Optics, 3rd ed., §4.2, the
    # shift theorem); the paraxial far field maps α to x = z·α = z·sin θ (Goodman §4.3).
    r = _tilted_disk("fraunhofer", **tilt)
    assert _lobe_centre(r, axis) == pytest.approx(sign * SIN_SHIFT, abs=TILT_TOL)


def test_the_exact_sum_puts_the_tilted_beam_at_z_tan_theta():
    # The first Rayleigh–Sommerfeld solution (Goodman §3.5) is exact in angle: the
    # undiffracted direction crosses the screen at x = z·tan θ, and a positive
    # tilt_x moves the pattern to +x.
    r = _tilted_disk("rayleigh_sommerfeld", tilt_x=THETA)
    assert _lobe_centre(r, 0) == pytest.approx(TAN_SHIFT, abs=TILT_TOL)


# ------------------------------------------------------------------- what intensity is


def test_intensity_is_the_squared_field_of_the_local_wave_not_projected():
    # A plane wave of irradiance I0 at 0.5 rad: the screen shows I0 = |U|², the
    # irradiance on a plane normal to the wave, not I0·cos θ through the screen plane
    # (stated convention; |U|² is irradiance, Goodman §4.1, common practice).
    s = bench(background="clear", kind="plane", irradiance=50.0, tilt_x=0.5, samples=9)
    r = compute(s, use_cache=False)
    np.testing.assert_allclose(r.intensity, 50.0, rtol=1e-12)
    np.testing.assert_allclose(r.intensity, np.abs(r.field) ** 2, rtol=1e-12)


# ------------------------------------------------------------- screen values are points


def test_a_screen_value_is_a_point_sample_at_the_pixel_centre():
    # Fraunhofer pattern of an a × b rectangle (Goodman §4.4.1):
    # I = I0 (ab/(λz))² sinc²(ax/(λz)) sinc²(by/(λz)), with numpy's sinc(t) = sin(πt)/(πt).
    a = b = 1e-3
    z, i0 = 10.0, 100.0
    s = bench(model.Rect(width=a, height=b), distance=z, width=0.04, samples=15, irradiance=i0)
    s.numerics.method = "fraunhofer"
    r = compute(s, use_cache=False)
    scale = i0 * (a * b / (LAM * z)) ** 2

    def pattern(x, y):
        return scale * np.sinc(a * x / (LAM * z)) ** 2 * np.sinc(b * y / (LAM * z)) ** 2

    X, Y = np.meshgrid(r.x, r.y)
    np.testing.assert_allclose(r.intensity, pattern(X, Y), rtol=0, atol=1e-5 * scale)
    # A pixel average would differ: at the peak by 9 % over these 2.7 mm pixels
    # (midpoint average over the pixel, 101 × 101 points).
    h = r.x[1] - r.x[0]
    t = (np.arange(101) + 0.5) / 101 - 0.5
    avg = pattern(t[None, :] * h, t[:, None] * h).mean()
    centre = r.intensity[r.y.size // 2, r.x.size // 2]
    assert centre == pytest.approx(scale, rel=1e-6)
    assert avg < 0.95 * centre


# --------------------------------------------------------------------- camera rounding


def test_camera_rounds_half_to_even_and_clips_to_full_scale():
    # DN = round(N (2^b − 1)/N_fw) with ties to even (IEEE 754 roundTiesToEven, as
    # numpy.rint), clipped to [0, 2^b − 1]. With N_fw = 2^b − 1 one DN is one electron.
    cam = model.Camera(
        bit_depth=12,
        full_well=4095.0,
        quantum_efficiency=0.5,
        shot_noise=False,
        read_noise=0.0,
    )
    photons = np.array([[5.0, 7.0, 1.0, 3.0, 5.2, 9000.0]])  # 2.5, 3.5, 0.5, 1.5, 2.6, 4500 e⁻
    dn = camera.digitise(photons, cam)["counts"]
    assert dn.tolist() == [[2, 4, 0, 2, 3, 4095]]
