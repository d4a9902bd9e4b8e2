"""Closed forms of compute.analytic against independent computations.

Each physics check names its source beside it. Book section numbers are given as
recalled from memory of the cited editions. The settings (wavelengths, sizes,
distances) are our own.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize, special

from compute import analytic as an

LAM = 632.8e-9  # m, a helium-neon line
I0 = 250.0  # W/m²


def _complex_quad(f, a, b, **kw):
    re = integrate.quad(lambda t: f(t).real, a, b, limit=400, **kw)[0]
    im = integrate.quad(lambda t: f(t).imag, a, b, limit=400, **kw)[0]
    return re + 1j * im


# ------------------------------------------------------------------------ rectangle


def test_rect_fraunhofer_matches_the_fraunhofer_integral():
    w, h, z = 120e-6, 300e-6, 2.0
    lz = LAM * z
    for x, y in [(0.0, 0.0), (3.1e-3, 0.0), (-7.7e-3, 1.9e-3), (15e-3, -4.4e-3)]:
        # Fraunhofer integral, Goodman 3rd ed. §4.3: U = e^{ikz}.../(iλz) ∫∫ t e^{-i2π(xξ+yη)/(λz)}
        ux = _complex_quad(lambda s, x=x: np.exp(-2j * np.pi * x * s / lz), -w / 2, w / 2)
        uy = _complex_quad(lambda s, y=y: np.exp(-2j * np.pi * y * s / lz), -h / 2, h / 2)
        expected = I0 * abs(ux * uy) ** 2 / lz**2
        got = an.rect_fraunhofer(x, y, w, h, LAM, z, I0)
        assert got == pytest.approx(expected, rel=1e-8, abs=1e-12 * I0 * (w * h / lz) ** 2)


def test_rect_fraunhofer_peak_is_incident_irradiance_times_area_over_lambda_z_squared():
    w, h, z = 80e-6, 2e-3, 1.5
    # Goodman 3rd ed. §4.4.1: I(0, 0) = (A/(λz))² I0
    assert an.rect_fraunhofer(0.0, 0.0, w, h, LAM, z, I0) == pytest.approx(
        I0 * (w * h / (LAM * z)) ** 2, rel=1e-14
    )


def test_rect_fraunhofer_broadcasts_over_a_grid():
    x = np.linspace(-1e-2, 1e-2, 7)[None, :]
    y = np.linspace(-2e-3, 2e-3, 5)[:, None]
    out = an.rect_fraunhofer(x, y, 1e-4, 1e-4, LAM, 1.0, I0)
    assert out.shape == (5, 7)
    # separable in x and y, Goodman 3rd ed. §4.4.1
    row = an.rect_fraunhofer(x, 0.0, 1e-4, 1e-4, LAM, 1.0, I0)
    col = an.rect_fraunhofer(0.0, y, 1e-4, 1e-4, LAM, 1.0, I0)
    peak = an.rect_fraunhofer(0.0, 0.0, 1e-4, 1e-4, LAM, 1.0, I0)
    np.testing.assert_allclose(out, row * col / peak, rtol=1e-12)


def test_slit_zeros_are_where_the_slit_field_vanishes():
    w, z = 50e-6, 1.2
    zeros = an.slit_zeros(w, LAM, z, 5)
    lz = LAM * z
    for m, xm in zip(range(1, 6), zeros, strict=True):
        # Hecht 5th ed. §10.2.1: zeros of sin β/β at β = π w x/(λz) = mπ
        root = optimize.brentq(
            lambda x: np.sin(np.pi * w * x / lz) / x, (m - 0.5) * lz / w, (m + 0.5) * lz / w
        )
        assert xm == pytest.approx(root, rel=1e-12)
    peak = an.rect_fraunhofer(0.0, 0.0, w, 1e-3, LAM, z, I0)
    assert np.all(an.rect_fraunhofer(zeros, 0.0, w, 1e-3, LAM, z, I0) < 1e-25 * peak)
    assert np.all(an.rect_fraunhofer(-zeros, 0.0, w, 1e-3, LAM, z, I0) < 1e-25 * peak)
    np.testing.assert_allclose(an.slit_zeros(w, LAM, z, [-2, 3]), [-2 * lz / w, 3 * lz / w])


def test_first_side_lobe_of_a_slit_is_0_0472_of_the_peak():
    w, z = 100e-6, 1.0
    lz = LAM * z
    peak = an.rect_fraunhofer(0.0, 0.0, w, 1e-3, LAM, z, I0)
    res = optimize.minimize_scalar(
        lambda x: -an.rect_fraunhofer(x, 0.0, w, 1e-3, LAM, z, I0),
        bounds=(1.05 * lz / w, 1.95 * lz / w),
        method="bounded",
        options={"xatol": 1e-12},
    )
    # Hecht 5th ed. §10.2.1: first secondary maximum is 0.0472 of the principal one
    assert -res.fun / peak == pytest.approx(0.0472, abs=5e-5)
    # ... at tan β = β (Hecht 5th ed. §10.2.1), solved independently here
    beta = optimize.brentq(lambda b: np.tan(b) - b, np.pi + 0.1, 1.5 * np.pi - 1e-6)
    assert res.x == pytest.approx(beta / np.pi * lz / w, rel=1e-6)


# --------------------------------------------------------------------------- circle


def _hankel_disk_field(r, a, lz, inner=0.0):
    """Fraunhofer field of a disk or ring by the Fourier–Bessel integral, no J1 used."""
    # Goodman 3rd ed. §2.1.5 and §4.4.2: circularly symmetric FT = 2π ∫ ρ J0(2π r ρ/(λz)) dρ
    val = integrate.quad(lambda p: p * special.j0(2 * np.pi * r * p / lz), inner, a, limit=200)
    return 2 * np.pi * val[0] / lz


def test_circle_fraunhofer_matches_the_fourier_bessel_integral():
    d, z = 1.5e-3, 3.0
    lz = LAM * z
    for r in [0.0, 0.4e-3, 1.0e-3, 1.55e-3, 2.9e-3, 6.1e-3]:
        expected = I0 * _hankel_disk_field(r, d / 2, lz) ** 2
        got = an.circle_fraunhofer(r, d, LAM, z, I0)
        peak = I0 * (np.pi * d**2 / 4 / lz) ** 2
        assert got == pytest.approx(expected, rel=1e-7, abs=1e-12 * peak)


def test_airy_first_zero_is_1_21967_lambda_z_over_d():
    d, z = 2e-3, 0.8
    r1 = an.airy_first_zero(d, LAM, z)
    # Born & Wolf 7th ed. §8.5.2: first dark ring at v = 3.8317, r = 0.610 λz/a = 1.21967 λz/D
    assert r1 == pytest.approx(1.21967 * LAM * z / d, rel=1e-5)
    assert r1 == pytest.approx(special.jn_zeros(1, 1)[0] * LAM * z / (np.pi * d), rel=1e-14)
    peak = an.circle_fraunhofer(0.0, d, LAM, z, I0)
    assert an.circle_fraunhofer(r1, d, LAM, z, I0) < 1e-25 * peak
    # Born & Wolf 7th ed. §8.5.2: the pattern is (A/(λz))² I0 at the centre
    assert peak == pytest.approx(I0 * (np.pi * d**2 / 4 / (LAM * z)) ** 2, rel=1e-14)


def test_encircled_energy_of_the_airy_pattern():
    d, z = 1e-3, 1.0
    r1 = an.airy_first_zero(d, LAM, z)
    # Born & Wolf 7th ed. §8.5.2: 83.8 % of the light falls inside the first dark ring
    assert an.circle_encircled_energy(r1, d, LAM, z) == pytest.approx(0.838, abs=5e-4)
    # ... and 91.0 % inside the second (Born & Wolf §8.5.2; value recalled from memory)
    r2 = special.jn_zeros(1, 2)[1] * LAM * z / (np.pi * d)
    assert an.circle_encircled_energy(r2, d, LAM, z) == pytest.approx(0.910, abs=1e-3)
    total = I0 * np.pi * d**2 / 4  # power through the aperture (Parseval, Goodman §2.1.3)
    for r in [0.3 * r1, r1, 1.7 * r1, 3.2 * r1]:
        inside = integrate.quad(
            lambda s: 2 * np.pi * s * an.circle_fraunhofer(s, d, LAM, z, I0), 0, r, limit=200
        )[0]
        assert an.circle_encircled_energy(r, d, LAM, z) == pytest.approx(inside / total, rel=1e-7)
    assert an.circle_encircled_energy(0.0, d, LAM, z) == 0.0
    # far out the remainder falls as 2/(πv) (Born & Wolf §8.5.2, asymptotics of J0² + J1²)
    far = 400 * r1
    v = np.pi * d * far / (LAM * z)
    assert 1 - an.circle_encircled_energy(far, d, LAM, z) == pytest.approx(
        2 / (np.pi * v), rel=1e-2
    )


def test_annulus_is_the_difference_of_two_disks():
    d, di, z = 2e-3, 1.2e-3, 4.0
    lz = LAM * z
    # a ring with no hole is the disk (Goodman §4.4.2)
    r = np.linspace(0, 5e-3, 41)
    np.testing.assert_allclose(
        an.annulus_fraunhofer(r, d, 0.0, LAM, z, I0),
        an.circle_fraunhofer(r, d, LAM, z, I0),
        rtol=1e-13,
    )
    # Fourier–Bessel integral over the ring only, Goodman 3rd ed. §4.4.2
    for rr in [0.0, 0.7e-3, 1.9e-3, 3.3e-3]:
        expected = I0 * _hankel_disk_field(rr, d / 2, lz, inner=di / 2) ** 2
        peak = I0 * (np.pi * (d**2 - di**2) / 4 / lz) ** 2
        got = an.annulus_fraunhofer(rr, d, di, LAM, z, I0)
        assert got == pytest.approx(expected, rel=1e-7, abs=1e-12 * peak)
    assert an.annulus_fraunhofer(0.0, d, di, LAM, z, I0) == pytest.approx(
        I0 * (np.pi * (d**2 - di**2) / 4 / lz) ** 2, rel=1e-13
    )


# -------------------------------------------------------------------------- grating


def _grating_direct(x, count, period, width, lz):
    """Sum of the far fields of each opening, with its own phase (Born & Wolf §8.6.1)."""
    centres = (np.arange(count) - (count - 1) / 2) * period
    single = width * np.sinc(width * x / lz)
    phases = np.exp(-2j * np.pi * np.outer(x, centres) / lz).sum(axis=1)
    return np.abs(single * phases) ** 2


@pytest.mark.parametrize("count", [1, 2, 7, 40])
def test_grating_matches_the_sum_over_openings(count):
    period, width, height, z = 100e-6, 35e-6, 1e-3, 1.0
    lz = LAM * z
    x = np.concatenate([np.linspace(-0.03, 0.03, 301), an.slit_zeros(period, LAM, z, 4)])
    got = an.grating_fraunhofer(x, 0.0, count, period, width, height, LAM, z, I0)
    # Born & Wolf 7th ed. §8.6.1: field = single-opening field × Σ_n e^{-i2π x n d/(λz)}
    expected = I0 * (height / lz) ** 2 * _grating_direct(x, count, period, width, lz)
    peak = I0 * (count * width * height / lz) ** 2
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12 * peak)


def test_grating_principal_maxima_are_n_squared_times_the_envelope():
    count, period, width, height, z = 12, 80e-6, 20e-6, 1e-3, 2.0
    orders = an.slit_zeros(period, LAM, z, [-3, -1, 1, 2, 3])  # x_m = m λz/d
    env = an.rect_fraunhofer(orders, 0.0, width, height, LAM, z, I0)
    got = an.grating_fraunhofer(orders, 0.0, count, period, width, height, LAM, z, I0)
    # Hecht 5th ed. §10.2.3: (sin Nβ / sin β)² → N² at β = mπ
    np.testing.assert_allclose(got, count**2 * env, rtol=1e-12)
    # continuous through β = mπ (no 0/0)
    near = an.grating_fraunhofer(
        orders * (1 + 1e-13), 0.0, count, period, width, height, LAM, z, I0
    )
    assert np.all(np.isfinite(near))
    np.testing.assert_allclose(near, got, rtol=1e-8)
    # single opening: the grating is the rectangle (Born & Wolf §8.6.1 with N = 1)
    x = np.linspace(-0.02, 0.02, 11)
    np.testing.assert_allclose(
        an.grating_fraunhofer(x, 1e-4, 1, period, width, height, LAM, z, I0),
        an.rect_fraunhofer(x, 1e-4, width, height, LAM, z, I0),
        rtol=1e-13,
    )


# --------------------------------------------------------------------- Fresnel zone


def _fresnel_rect_direct(x, y, w, h, z):
    """Fresnel integral over the rectangle by quadrature (Goodman 3rd ed. §4.2)."""
    lz = LAM * z
    k = 2 * np.pi / LAM
    ux = _complex_quad(lambda s: np.exp(1j * np.pi * (x - s) ** 2 / lz), -w / 2, w / 2)
    uy = _complex_quad(lambda s: np.exp(1j * np.pi * (y - s) ** 2 / lz), -h / 2, h / 2)
    return math.sqrt(I0) * np.exp(1j * k * z) / (1j * lz) * ux * uy


def test_rect_fresnel_field_matches_the_fresnel_integral():
    w, h, z = 2e-3, 1.2e-3, 0.9  # Fresnel numbers ≈ 1.8 and 0.6
    for x, y in [(0.0, 0.0), (0.6e-3, 0.0), (-1.1e-3, 0.4e-3), (2.5e-3, -1.3e-3)]:
        expected = _fresnel_rect_direct(x, y, w, h, z)
        got = an.rect_fresnel_field(x, y, w, h, LAM, z, I0)
        assert abs(got - expected) < 1e-8 * math.sqrt(I0)
        assert an.rect_fresnel(x, y, w, h, LAM, z, I0) == pytest.approx(abs(got) ** 2, rel=1e-14)


def test_rect_fresnel_tends_to_fraunhofer_at_small_fresnel_number():
    w, h, z = 40e-6, 60e-6, 20.0  # Fresnel number (w/2)²/(λz) ≈ 3e-5
    lz = LAM * z
    x = np.linspace(-2.5, 2.5, 11) * lz / w
    y = np.linspace(-2.5, 2.5, 11)[:, None] * lz / h
    peak = I0 * (w * h / lz) ** 2
    # Goodman 3rd ed. §4.3: the Fraunhofer form is the N_F ≪ 1 limit of the Fresnel form
    np.testing.assert_allclose(
        an.rect_fresnel(x, y, w, h, LAM, z, I0),
        an.rect_fraunhofer(x, y, w, h, LAM, z, I0),
        atol=1e-3 * peak,
    )


def test_rect_fresnel_tends_to_the_geometric_image_at_large_fresnel_number():
    w, h, z = 50e-3, 50e-3, 0.1  # Fresnel number ≈ 1e4
    k = 2 * np.pi / LAM
    field = an.rect_fresnel_field(0.0, 0.0, w, h, LAM, z, I0)
    # Goodman 3rd ed. §4.5.1: as N_F grows the pattern approaches the geometric shadow
    assert abs(field * np.exp(-1j * k * z) / math.sqrt(I0) - 1) < 0.01
    assert an.rect_fresnel(0.0, 2 * w, w, h, LAM, z, I0) < 1e-4 * I0


# ----------------------------------------------------------------------- knife edge


def test_knife_edge_values_at_the_shadow_boundary_and_far_from_it():
    z = 0.5
    scale = math.sqrt(LAM * z / 2)  # x = u √(λz/2)
    # Born & Wolf 7th ed. §8.7.3: a quarter of the incident irradiance at the boundary
    assert an.knife_edge(0.0, LAM, z, I0) == pytest.approx(0.25 * I0, rel=1e-14)
    # deep shadow → 0 as 1/(2π²u²), deep lit side → I0 (Born & Wolf §8.7.3, asymptotics of C, S)
    u = 40.0
    assert an.knife_edge(-u * scale, LAM, z, I0) == pytest.approx(
        I0 / (2 * np.pi**2 * u**2), rel=1e-2
    )
    assert an.knife_edge(400 * scale, LAM, z, I0) == pytest.approx(I0, rel=5e-3)


def test_knife_edge_matches_the_fresnel_integral_by_quadrature():
    z = 0.3
    scale = math.sqrt(LAM * z / 2)
    for u in [-2.3, -0.6, 0.4, 1.2, 2.9]:
        # ∫_{-u}^{∞} e^{iπt²/2} dt = ∫_{-u}^{0} … + (1 + i)/2; Born & Wolf §8.7.2: C(∞) = S(∞) = ½
        tail = _complex_quad(lambda t: np.exp(1j * np.pi * t * t / 2), -u, 0.0)
        # Fresnel integral of the half-plane, Goodman 3rd ed. §4.2; the y integral gives 1 + i
        expected = I0 * abs((1 + 1j) / 2j * (tail + (1 + 1j) / 2)) ** 2
        assert an.knife_edge(u * scale, LAM, z, I0) == pytest.approx(expected, rel=1e-9)
        field = an.knife_edge_field(u * scale, LAM, z, I0)
        assert abs(field) ** 2 == pytest.approx(expected, rel=1e-9)


def test_knife_edge_is_the_edge_of_a_very_wide_rectangle():
    z = 1.0
    big = 5.0  # m; the far edges are thousands of fringe widths away
    s = np.linspace(-1.5e-3, 2.5e-3, 17)  # distance into the lit side of the left edge
    # Goodman 3rd ed. §4.5.1: the rectangle's pattern is a product of two edge pairs
    rect = an.rect_fresnel(-big / 2 + s, 0.0, big, big, LAM, z, I0)
    # the far edges add waves of relative amplitude ~1/(πα), α = √(2/(λz)) big/2 (≈ 1e-4)
    np.testing.assert_allclose(an.knife_edge(s, LAM, z, I0), rect, rtol=0, atol=1e-3 * I0)


def test_knife_edge_first_maximum():
    z = 2.0
    x_max, value = an.knife_edge_first_maximum(LAM, z, I0)
    # Born & Wolf 7th ed. §8.7.3: the brightest fringe is about 1.37 I0
    assert value / I0 == pytest.approx(1.37, abs=1e-3)
    # at u ≈ 1.217 (value recalled from memory)
    assert x_max / math.sqrt(LAM * z / 2) == pytest.approx(1.217, abs=1e-3)
    # it is the largest value anywhere behind the edge (dense sampling, common practice)
    xs = np.linspace(-5, 20, 200_001) * math.sqrt(LAM * z / 2)
    sampled = an.knife_edge(xs, LAM, z, I0)
    assert sampled.max() <= value * (1 + 1e-12)
    assert xs[np.argmax(sampled)] == pytest.approx(x_max, abs=2 * (xs[1] - xs[0]))


# ------------------------------------------------------------ circular aperture, axis


def _rs_axis_direct(z, a, lam):
    """On-axis Rayleigh–Sommerfeld integral by quadrature over r = √(z² + ρ²)."""
    k = 2 * np.pi / lam
    # Goodman 3rd ed. §3.5: U = 1/(2π) ∫∫ U0 cos θ (1/r − ik) e^{ikr}/r dS, dS = 2π r dr
    big_r = math.hypot(z, a)
    return z * _complex_quad(lambda r: (1 / r - 1j * k) * np.exp(1j * k * r) / r, z, big_r)


@pytest.mark.parametrize("z", [3e-6, 25e-6, 0.2e-3, 1.7e-3])
def test_circle_on_axis_matches_the_rayleigh_sommerfeld_integral(z):
    d, lam = 40e-6, 0.5e-6
    expected = I0 * abs(_rs_axis_direct(z, d / 2, lam)) ** 2
    assert an.circle_on_axis(z, d, lam, I0) == pytest.approx(expected, rel=1e-8)


def test_circle_on_axis_paraxial_limit_and_fresnel_zones():
    d = 3e-3
    a = d / 2
    z = np.geomspace(0.2, 50.0, 50)
    # Goodman 3rd ed. §4.2: the Fresnel form holds for z³ ≫ π a⁴/(4λ)
    np.testing.assert_allclose(
        an.circle_on_axis(z, d, LAM, I0),
        an.circle_on_axis(z, d, LAM, I0, exact=False),
        atol=2e-3 * I0,
    )
    # Hecht 5th ed. §10.3.3: one open zone gives 4 I0, two give darkness
    z1 = a**2 / LAM
    assert an.open_zones(z1, d, LAM) == pytest.approx(1.0)
    assert an.circle_on_axis(z1, d, LAM, I0, exact=False) == pytest.approx(4 * I0, rel=1e-12)
    assert an.circle_on_axis(z1 / 2, d, LAM, I0, exact=False) < 1e-20 * I0
    # with the zones counted exactly (edge path in half waves, Hecht §10.3.1), the exact
    # on-axis value is ≈ 4 I0 at odd and ≈ 0 at even counts (Heurtley, JOSA 63, 1003, 1973)
    z_exact = optimize.brentq(lambda s: an.open_zones(s, d, LAM, exact=True) - 3, 0.3, 3.0)
    assert an.circle_on_axis(z_exact, d, LAM, I0) == pytest.approx(4 * I0, rel=1e-5)
    z_even = optimize.brentq(lambda s: an.open_zones(s, d, LAM, exact=True) - 4, 0.3, 3.0)
    assert an.circle_on_axis(z_even, d, LAM, I0) < 1e-9 * I0


def test_circle_on_axis_far_field_is_the_airy_peak():
    d, z = 0.5e-3, 80.0  # about 100 Fraunhofer distances 2D²/λ ≈ 0.8 m
    # Goodman 3rd ed. §4.4.2: on-axis far field (A/(λz))² I0
    assert an.circle_on_axis(z, d, LAM, I0) == pytest.approx(
        an.circle_fraunhofer(0.0, d, LAM, z, I0), rel=1e-3
    )


def test_open_zones_is_the_fresnel_number():
    a, z = 0.7e-3, 0.35
    # Hecht 5th ed. §10.3.3: the number of open zones seen from the axis is a²/(λz)
    assert an.open_zones(z, 2 * a, LAM) == pytest.approx(an.fresnel_number(a, LAM, z))
    # exact count is the edge path difference in half waves, Hecht §10.3.1
    path = math.hypot(z, a) - z
    assert an.open_zones(z, 2 * a, LAM, exact=True) == pytest.approx(path / (LAM / 2), rel=1e-9)


# ---------------------------------------------------------------------- Gaussian beam


def test_gaussian_beam_radius_curvature_and_gouy_phase():
    w0 = 0.4e-3
    z_r = np.pi * w0**2 / LAM
    beam = an.gaussian_beam(0.0, np.array([0.0, z_r, -z_r, 1e3 * z_r]), w0, LAM, 1e-3)
    assert beam.rayleigh_range == pytest.approx(z_r)
    # Siegman, Lasers (1986), §17.1: w(z_R) = √2 w0, R(z_R) = 2 z_R, ζ(z_R) = π/4, R(0) = ∞
    assert beam.radius[1] == pytest.approx(math.sqrt(2) * w0, rel=1e-14)
    assert beam.curvature_radius[1] == pytest.approx(2 * z_r, rel=1e-14)
    assert beam.curvature_radius[2] == pytest.approx(-2 * z_r, rel=1e-14)
    assert math.isinf(beam.curvature_radius[0])
    assert beam.gouy_phase[1] == pytest.approx(np.pi / 4, rel=1e-14)
    # far-field half-angle divergence λ/(π w0), Siegman §17.1
    assert beam.radius[3] / (1e3 * z_r) == pytest.approx(LAM / (np.pi * w0), rel=1e-6)
    # R(z) is smallest at z = z_R (Siegman §17.1)
    zs = np.linspace(0.2, 5, 2001) * z_r
    radii = an.gaussian_beam(0.0, zs, w0, LAM, 1e-3).curvature_radius
    assert zs[np.argmin(radii)] == pytest.approx(z_r, rel=5e-3)


def test_gaussian_beam_carries_its_power():
    w0, p = 0.25e-3, 3e-3
    for z in [0.0, 0.13, 2.0]:
        beam = an.gaussian_beam(0.0, z, w0, LAM, p)
        # Siegman, Lasers (1986), §17.1: 2π ∫ I r dr = P
        total = integrate.quad(
            lambda r, z=z: 2 * np.pi * r * an.gaussian_beam(r, z, w0, LAM, p).irradiance,
            0,
            12 * float(beam.radius),
        )[0]
        assert total == pytest.approx(p, rel=1e-9)


def test_gaussian_field_is_the_fresnel_propagation_of_its_waist():
    w0, p, z = 0.3e-3, 1e-3, 0.35  # about 0.8 Rayleigh ranges
    k = 2 * np.pi / LAM
    amp0 = math.sqrt(2 * p / (np.pi * w0**2))
    for r in [0.0, 0.2e-3, 0.45e-3, 0.9e-3]:
        # Goodman 3rd ed. §4.2 (Fresnel integral, circular symmetry via the Hankel form of §2.1.5)
        inner = _complex_quad(
            lambda s, r=r: (
                amp0
                * np.exp(-(s**2) / w0**2)
                * np.exp(1j * k * s * s / (2 * z))
                * special.j0(k * s * r / z)
                * s
            ),
            0,
            8 * w0,
        )
        expected = np.exp(1j * k * z) / (1j * LAM * z) * np.exp(1j * k * r * r / (2 * z))
        expected *= 2 * np.pi * inner
        got = an.gaussian_field(r, 0.0, z, w0, LAM, p)
        assert abs(got - expected) < 1e-7 * amp0
    # |U|² is the irradiance of gaussian_beam (Siegman §17.1)
    x = np.linspace(-1e-3, 1e-3, 9)
    beam = an.gaussian_beam(np.abs(x), z, w0, LAM, p)
    np.testing.assert_allclose(
        np.abs(an.gaussian_field(x, 0.0, z, w0, LAM, p)) ** 2, beam.irradiance, rtol=1e-12
    )


# -------------------------------------------------------------- distances and numbers


def test_talbot_distance_exact_tends_to_paraxial():
    # Rayleigh (1881); Goodman 3rd ed. §4.5.2: z_T = 2d²/λ in the paraxial limit
    d = 100e-6
    assert an.talbot_distance(d, LAM) == pytest.approx(2 * d**2 / LAM, rel=1e-14)
    for ratio in [3.0, 30.0, 3000.0]:
        d = ratio * LAM
        exact = an.talbot_distance(d, LAM, exact=True)
        paraxial = an.talbot_distance(d, LAM)
        s = (LAM / d) ** 2
        # series of λ/(1 − √(1 − s)) = (2d²/λ)(1 − s/4 − s²/16 …) (common practice, no source)
        assert exact / paraxial == pytest.approx(1 - s / 4 - s * s / 16, abs=s**3)
    # angular spectrum, Goodman 3rd ed. §3.10: order 1 lags order 0 by exactly one wave at z_T
    d = 2.5 * LAM
    z_t = an.talbot_distance(d, LAM, exact=True)
    k = 2 * np.pi / LAM
    slip = k * z_t * (1 - math.cos(math.asin(LAM / d)))
    assert slip == pytest.approx(2 * np.pi, rel=1e-12)


def test_paraxial_talbot_distance_restores_a_grating_field():
    d = 50e-6
    z_t = an.talbot_distance(d, LAM)
    rng = np.random.default_rng(7)
    m = np.arange(-6, 7)
    coeff = rng.normal(size=m.size) + 1j * rng.normal(size=m.size)
    x = np.linspace(0, d, 64, endpoint=False)

    def field(z):
        # Fresnel transfer function exp(−iπλz f²) on orders f = m/d, Goodman 3rd ed. §4.5.2
        h = np.exp(-1j * np.pi * LAM * z * (m / d) ** 2)
        return (coeff * h * np.exp(2j * np.pi * np.outer(x, m) / d)).sum(axis=1)

    np.testing.assert_allclose(field(z_t), field(0.0), atol=1e-9)
    # half way, the image is shifted by half a period (Goodman §4.5.2)
    shifted = (coeff * np.exp(2j * np.pi * np.outer(x + d / 2, m) / d)).sum(axis=1)
    np.testing.assert_allclose(field(z_t / 2), shifted, atol=1e-9)
    assert not np.allclose(field(z_t / 3), field(0.0), atol=1e-3)


def test_talbot_exact_needs_period_longer_than_wavelength():
    # no first order propagates when sin θ = λ/d > 1 (grating equation, Born & Wolf §8.6.1)
    with pytest.raises(ValueError, match="period"):
        an.talbot_distance(0.9 * LAM, LAM, exact=True)


def test_lens_focus_peak_and_airy_radius():
    d, f = 6e-3, 0.2
    lf = LAM * f
    area = np.pi * d**2 / 4
    # Goodman 3rd ed. §5.2: the back focal plane is the Fraunhofer pattern at z = f
    assert an.lens_focus_peak(I0, d, LAM, f) == pytest.approx(I0 * (area / lf) ** 2, rel=1e-14)
    p = I0 * area
    assert an.lens_focus_peak(p, d, LAM, f, given="power") == pytest.approx(
        an.lens_focus_peak(I0, d, LAM, f), rel=1e-14
    )
    # the power in the focal Airy pattern equals the power through the lens (Parseval,
    # Goodman §2.1.3); integrated here to the tenth dark ring, Born & Wolf §8.5.2
    r10 = special.jn_zeros(1, 10)[-1] * lf / (np.pi * d)
    inside = integrate.quad(
        lambda r: 2 * np.pi * r * an.circle_fraunhofer(r, d, LAM, f, I0),
        0,
        r10,
        limit=400,
    )[0]
    assert inside / p == pytest.approx(1 - special.j0(np.pi * d * r10 / lf) ** 2, rel=1e-7)
    # Born & Wolf §8.5.2: first dark ring at 1.21967 λf/D
    assert an.lens_airy_radius(d, LAM, f) == pytest.approx(1.21967 * lf / d, rel=1e-5)
    with pytest.raises(ValueError, match="given"):
        an.lens_focus_peak(I0, d, LAM, f, given="energy")


def test_fresnel_number_and_fraunhofer_distance():
    size = 2e-3
    z_f = an.fraunhofer_distance(size, LAM)
    assert z_f == pytest.approx(2 * size**2 / LAM)
    # Goodman 3rd ed. §4.3: at 2D²/λ the dropped quadratic phase k a²/(2z) is π/8
    k = 2 * np.pi / LAM
    assert k * (size / 2) ** 2 / (2 * z_f) == pytest.approx(np.pi / 8, rel=1e-14)
    # ... and the Fresnel number of the half-width is then 1/8
    assert an.fresnel_number(size / 2, LAM, z_f) == pytest.approx(1 / 8, rel=1e-14)


# ----------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("call", "word"),
    [
        (lambda: an.rect_fraunhofer(0, 0, -1e-4, 1e-4, LAM, 1, I0), "width"),
        (lambda: an.rect_fresnel(0, 0, 1e-4, 1e-4, LAM, 0.0, I0), "z"),
        (lambda: an.circle_fraunhofer(0, 1e-3, float("nan"), 1, I0), "wavelength"),
        (lambda: an.annulus_fraunhofer(0, 1e-3, 1e-3, LAM, 1, I0), "inner_diameter"),
        (lambda: an.grating_fraunhofer(0, 0, 3, 1e-4, 2e-4, 1e-3, LAM, 1, I0), "width"),
        (lambda: an.grating_fraunhofer(0, 0, 2.5, 1e-4, 5e-5, 1e-3, LAM, 1, I0), "count"),
        (lambda: an.slit_zeros(1e-4, LAM, 1, [0, 1]), "orders"),
        (lambda: an.knife_edge(0.0, LAM, 1, -1.0), "irradiance"),
        (lambda: an.gaussian_beam(0, 0, 0.0, LAM, 1e-3), "waist"),
        (lambda: an.rect_fraunhofer(float("inf"), 0, 1e-4, 1e-4, LAM, 1, I0), "coordinates"),
    ],
)
def test_bad_parameters_name_what_is_wrong(call, word):
    with pytest.raises(ValueError, match=word):
        call()
