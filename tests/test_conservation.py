"""Power conservation, agreement between routes, and smoothness under sub-pixel changes."""

import numpy as np
import pytest
from benchsetup import bench

from compute import analytic, metrics, model
from compute.engine import compute

LAM = 6.328e-7


def _gaussian_bench(method, precision, distance):
    # A Gaussian beam through an opening 8 radii wide: the window holds the field.
    w0 = 1e-4
    return bench(
        model.Circle(diameter=8 * w0),
        kind="gaussian",
        waist=w0,
        power=1e-3,
        distance=distance,
        width=1e-3,
        samples=301,
        method=method,
        precision=precision,
    )


@pytest.mark.parametrize(
    "method, distance",
    [("angular_spectrum", 0.01), ("fresnel", 0.01), ("fresnel", 0.05), ("fraunhofer", 2.0)],
)
@pytest.mark.parametrize("precision, tol", [("double", 1e-6), ("single", 1e-4)])
def test_power_is_conserved(method, distance, precision, tol):
    # Parseval's theorem (Goodman, Introduction to Fourier Optics, 3rd ed., §2.1.2):
    # a lossless propagator keeps the power through the aperture on a window that
    # holds the whole field.
    w = 1e-3 if method != "fraunhofer" else 0.05
    s = _gaussian_bench(method, precision, distance)
    s.screen.width = s.screen.height = w
    r = compute(s, use_cache=False)
    out = metrics.power(r.x, r.y, r.intensity)
    assert out == pytest.approx(r.power_in, rel=tol)
    assert r.power_in == pytest.approx(1e-3, rel=1e-6)


def test_fresnel_forms_agree():
    # Voelz, Computational Fourier Optics (2011), §5.1: the transfer-function form
    # samples its kernel without aliasing when the pitch is at least λz/L, the
    # impulse-response form otherwise; both compute the Fresnel integral, checked
    # against its closed form for a rectangle (Goodman, 3rd ed., §4.5.1).
    a = model.Rect(width=1e-3, height=1e-3)
    near = compute(bench(a, distance=0.02, width=1.5e-3, samples=150, method="fresnel", grid=1024))
    assert near.plan.variant == "transfer_function"
    ref = analytic.rect_fresnel(near.x[None, :], near.y[:, None], 1e-3, 1e-3, LAM, 0.02, 100.0)
    assert np.max(np.abs(near.intensity - ref)) <= 0.02 * ref.max()
    long = compute(bench(a, distance=1.0, width=4e-3, samples=160, method="fresnel"))
    assert long.plan.variant == "impulse_response"
    ref = analytic.rect_fresnel(long.x[None, :], long.y[:, None], 1e-3, 1e-3, LAM, 1.0, 100.0)
    assert np.max(np.abs(long.intensity - ref)) <= 0.01 * ref.max()


def test_sub_pixel_width_sweep_is_smooth():
    # A slit width moved in steps of 1/7 of the aperture pitch changes the on-axis
    # far-field irradiance as (2 w h / λz)² I0 exactly (Goodman §4.4.1), with no
    # staircase from the rasterisation.
    z = 50.0
    values, widths = [], []
    base = 1e-4
    pitch = None
    for k in range(15):
        w = base * (1 + k / 700)
        s = bench(
            model.Rect(x=-2e-4, width=w, height=1e-3),
            model.Rect(x=2e-4, width=w, height=1e-3),
            distance=z,
            width=2e-3,
            samples=5,
            grid=128,
        )
        r = compute(s, use_cache=False)
        pitch = r.plan.dx
        values.append(r.intensity[2, 2])
        widths.append(w)
    values = np.array(values)
    widths = np.array(widths)
    assert (widths[1] - widths[0]) < pitch / 5  # sub-pixel steps
    assert np.all(np.diff(values) > 0)
    expected = 100.0 * (2 * widths * 1e-3 / (LAM * z)) ** 2
    assert np.max(np.abs(values / expected - 1)) < 1e-6
