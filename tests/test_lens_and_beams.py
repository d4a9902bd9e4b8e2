"""A thin lens's focus and a Gaussian beam's width and peak, in absolute units."""

import math

import numpy as np
import pytest
from benchsetup import bench, centre_row

from compute import analytic, metrics, model
from compute.engine import compute

LAM = 6.328e-7


def test_lens_focus_airy_scale_and_peak():
    # Goodman, Introduction to Fourier Optics, 3rd ed., §5.2.2 and §6.3: in the back
    # focal plane the pattern is the aperture's Fourier transform at scale λf; a
    # uniformly lit circular lens gives an Airy disk of first-zero radius
    # 1.21967 λf/D and peak irradiance I0 (A/(λf))².
    d, f = 5e-3, 0.2
    r1 = float(analytic.lens_airy_radius(d, LAM, f))
    s = bench(model.Circle(diameter=d), distance=f, lens=f, width=8 * r1, samples=201)
    r = compute(s, use_cache=False)
    x, cut = centre_row(r)
    first = min(m for m in metrics.minima(x, cut) if m > 0)
    assert first == pytest.approx(1.21967 * LAM * f / d, rel=0.01)
    peak = float(analytic.lens_focus_peak(100.0, d, LAM, f))
    assert r.intensity.max() == pytest.approx(peak, rel=0.01)
    assert peak == pytest.approx(100.0 * (math.pi * d * d / 4 / (LAM * f)) ** 2, rel=1e-9)


def test_lens_defocus_is_computed_not_refused():
    # Away from focus the lens adds its quadratic phase; power stays near the axis
    # and the peak drops (common practice, no source).
    d, f = 5e-3, 0.2
    r1 = float(analytic.lens_airy_radius(d, LAM, f))
    focus = compute(bench(model.Circle(diameter=d), distance=f, lens=f, width=8 * r1, samples=101))
    off = compute(
        bench(model.Circle(diameter=d), distance=0.99 * f, lens=f, width=8 * r1, samples=101)
    )
    assert off.intensity.max() < 0.9 * focus.intensity.max()


@pytest.mark.parametrize("z_over_zr", [0.5, 1.0, 3.0])
def test_gaussian_beam_width_and_peak(z_over_zr):
    # Siegman, Lasers (1986), §17.1: w(z) = w0 √(1 + (z/z_R)²), peak 2P/(πw²);
    # D4σ equals 2w for a Gaussian (ISO 11146-1).
    w0, power = 3e-4, 1e-3
    zr = math.pi * w0**2 / LAM
    z = z_over_zr * zr
    beam = analytic.gaussian_beam(0.0, z, w0, LAM, power)
    wz = float(beam.radius)
    s = bench(
        model.Circle(diameter=8 * w0),
        kind="gaussian",
        waist=w0,
        power=power,
        distance=z,
        width=8 * wz,
        samples=241,
    )
    r = compute(s, use_cache=False)
    d4x, d4y = metrics.d4sigma(r.x, r.y, r.intensity)
    assert d4x / 2 == pytest.approx(wz, rel=0.01)
    assert d4y / 2 == pytest.approx(wz, rel=0.01)
    assert r.intensity.max() == pytest.approx(2 * power / (math.pi * wz**2), rel=0.01)


def test_gaussian_waist_offset_curvature():
    # Siegman §17.1: a beam whose waist lies before the aperture arrives with
    # curvature R(d) and width w(d); propagating it further by z gives w(d + z).
    w0, power, dwaist = 2e-4, 1e-3, 0.1
    zr = math.pi * w0**2 / LAM
    z = 0.5 * zr
    wz = float(analytic.gaussian_beam(0.0, dwaist + z, w0, LAM, power).radius)
    s = bench(
        model.Circle(diameter=12 * w0),
        kind="gaussian",
        waist=w0,
        waist_offset=dwaist,
        power=power,
        distance=z,
        width=8 * wz,
        samples=241,
    )
    r = compute(s, use_cache=False)
    d4x, _ = metrics.d4sigma(r.x, r.y, r.intensity)
    assert d4x / 2 == pytest.approx(wz, rel=0.01)


def test_clear_background_gaussian_is_the_free_beam():
    # With no element in the way the screen shows the free beam (Siegman §17.1).
    w0, power = 3e-4, 1e-3
    z = 2.0
    s = bench(
        kind="gaussian",
        waist=w0,
        power=power,
        distance=z,
        width=0.02,
        samples=101,
        background="clear",
    )
    r = compute(s, use_cache=False)
    ref = analytic.gaussian_beam(np.hypot(r.x[None, :], r.y[:, None]), z, w0, LAM, power)
    assert np.max(np.abs(r.intensity - ref.irradiance)) <= 1e-9 * ref.irradiance.max()
