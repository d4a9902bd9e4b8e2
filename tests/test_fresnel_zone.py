"""Fresnel-zone results against the Fresnel-integral and on-axis closed forms."""

import numpy as np
import pytest
from benchsetup import bench, centre_row

from compute import analytic, model
from compute.engine import compute

LAM = 6.328e-7


@pytest.mark.parametrize("method", ["auto", "fresnel", "angular_spectrum"])
def test_rect_against_fresnel_integrals(method):
    # Goodman, Introduction to Fourier Optics, 3rd ed., §4.5.1: the Fresnel pattern of
    # a rectangle is a product of Fresnel-integral differences (scipy.special.fresnel).
    w, h, z = 1e-3, 5e-4, 0.2  # Fresnel numbers 2.0 and 0.49
    s = bench(
        model.Rect(width=w, height=h),
        distance=z,
        width=2e-3,
        height=1.2e-3,
        samples=200,
        method=method,
    )
    r = compute(s, use_cache=False)
    ref = analytic.rect_fresnel(r.x[None, :], r.y[:, None], w, h, LAM, z, 100.0)
    assert np.max(np.abs(r.intensity - ref)) <= 0.02 * 100.0
    if method == "auto":
        assert r.method == "fresnel"


@pytest.mark.parametrize("zones", [1, 2, 3, 4, 7])
def test_circle_on_axis_counts_zones(zones):
    # Goodman §4.5.1 / Born & Wolf §8.2: on-axis irradiance behind a circular aperture,
    # exact Rayleigh–Sommerfeld form; bright (≈ 4 I0) for an odd number of open
    # Fresnel zones, dark for an even number.
    d = 1e-3
    a = d / 2
    z = a * a / (LAM * zones)
    s = bench(model.Circle(diameter=d), distance=z, width=2e-5, samples=3)
    r = compute(s, use_cache=False)
    on_axis = r.intensity[r.intensity.shape[0] // 2, 1]
    ref = float(analytic.circle_on_axis(z, d, LAM, 100.0, exact=True))
    assert on_axis == pytest.approx(ref, abs=0.02 * 4 * 100.0)
    if zones % 2:
        assert on_axis > 3.8 * 100.0
    else:
        assert on_axis < 0.1 * 100.0


def test_knife_edge():
    # Born & Wolf, Principles of Optics, 7th ed., §8.7.3; Hecht, Optics, 5th ed., §10.3.7:
    # behind a straight edge the irradiance is I0/4 on the geometric shadow line and
    # about 1.37 I0 at the first maximum on the lit side.
    z = 0.5
    s = bench(model.Edge(), distance=z, width=3e-3, x=0.5e-3, height=1e-4, samples=601)
    r = compute(s, use_cache=False)
    x, cut = centre_row(r)
    i_edge = np.interp(0.0, x, cut)
    assert i_edge == pytest.approx(0.25 * 100.0, rel=0.02)
    x_max, i_max = analytic.knife_edge_first_maximum(LAM, z, 100.0)
    lit = x > 0
    assert cut[lit].max() == pytest.approx(1.37 * 100.0, rel=0.01)
    assert cut[lit].max() == pytest.approx(i_max, rel=0.01)
    assert x[lit][np.argmax(cut[lit])] == pytest.approx(x_max, abs=2 * (x[1] - x[0]))
    ref = analytic.knife_edge(x, LAM, z, 100.0)
    assert np.max(np.abs(cut - ref)) <= 0.02 * 100.0
