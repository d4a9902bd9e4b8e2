"""`auto` across regimes, without a user-chosen grid, and the validity report."""

import math

import numpy as np
import pytest
from benchsetup import bench, centre_row

from compute import analytic, metrics, model
from compute.engine import check, compute
from compute.errors import SetupError

LAM = 6.328e-7
D = 1e-3
Z_F = 2 * D * D / LAM  # Fraunhofer distance, 3.16 m


@pytest.mark.parametrize(
    "z",
    [10 * D, 30 * D, 0.1, 0.5, Z_F, 10 * Z_F, 1e4 * Z_F],
    ids=["10D", "30D", "0.1m", "0.5m", "zF", "10zF", "1e4zF"],
)
def test_auto_on_axis_circle_all_distances(z):
    # Exact on-axis Rayleigh–Sommerfeld irradiance behind a circular aperture
    # (Goodman, Introduction to Fourier Optics, 3rd ed., §4.5.1, problem 4-14): valid at
    # every distance, so it checks `auto` from the near to the far field.
    s = bench(model.Circle(diameter=D), distance=z, width=D * 1e-2 * max(1.0, z / Z_F), samples=3)
    r = compute(s, use_cache=False)
    ref = float(analytic.circle_on_axis(z, D, LAM, 100.0, exact=True))
    assert r.intensity[1, 1] == pytest.approx(ref, rel=0.02, abs=0.02 * 100.0 * min(4.0, 1.0))
    # The approximations auto relies on all hold (the three-pixel screen itself is
    # too coarse for the finest fringes, which the report says separately).
    assert all(v.verdict == "ok" for v in r.validity if v.key != "screen_sampling")


def test_auto_far_field_pattern_at_1e4_fraunhofer_distances():
    # Born & Wolf, Principles of Optics, 7th ed., §8.5.2: Airy first zero 1.21967 λz/D.
    z = 1e4 * Z_F
    r1 = float(analytic.airy_first_zero(D, LAM, z))
    r = compute(bench(model.Circle(diameter=D), distance=z, width=6 * r1, samples=301))
    x, cut = centre_row(r)
    first = min(m for m in metrics.minima(x, cut) if m > 0)
    assert first == pytest.approx(r1, rel=0.01)
    assert r.method == "fraunhofer"


def test_auto_crosses_methods_with_distance():
    # Common practice, no source: near field → angular spectrum, Fresnel zone →
    # Fresnel, far field → Fraunhofer.
    methods = []
    for z in (10 * D, 0.5, 100 * Z_F):
        p = check(bench(model.Circle(diameter=D), distance=z, width=2 * D, samples=64))
        methods.append(p.method)
    assert methods == ["angular_spectrum", "fresnel", "fraunhofer"]


def test_forced_method_outside_validity_is_computed_and_marked_invalid():
    # Goodman §4.3: the Fraunhofer form needs z ≫ k(ξ² + η²)_max / 2.
    s = bench(model.Circle(diameter=D), distance=0.05, width=2 * D, samples=64, method="fraunhofer")
    r = compute(s, use_cache=False)
    assert np.all(np.isfinite(r.intensity))
    verdicts = {v.key: v.verdict for v in r.validity}
    assert verdicts["fraunhofer_phase"] == "invalid"
    assert verdicts["fresnel_number"] == "invalid"
    assert r.plan.worst == "invalid"


def test_report_items_have_value_limit_verdict_sentence():
    p = check(bench(model.Circle(diameter=D), distance=1.0, width=5e-3, samples=100))
    keys = {v.key for v in p.validity}
    assert {
        "fresnel_number",
        "fraunhofer_distance",
        "fraunhofer_phase",
        "paraxial_phase",
        "max_angle",
        "bandwidth",
        "screen_sampling",
    } <= keys
    for v in p.validity:
        assert v.verdict in {"ok", "marginal", "invalid"}
        assert v.sentence.endswith(".")
        assert math.isfinite(v.value)
    nf = next(v for v in p.validity if v.key == "fresnel_number")
    # Fresnel number a²/(λz) (Goodman §4.5.1).
    assert nf.value == pytest.approx((D / 2) ** 2 / (LAM * 1.0), rel=1e-9)
    fd = next(v for v in p.validity if v.key == "fraunhofer_distance")
    assert fd.value == pytest.approx(Z_F, rel=1e-9)


def test_memory_limit_refuses_before_allocating():
    s = bench(
        model.Circle(diameter=D),
        distance=1.0,
        width=5e-3,
        samples=100,
        grid=32768,
        method="angular_spectrum",
    )
    with pytest.raises(SetupError) as err:
        compute(s)
    assert err.value.path == "numerics.grid"
    assert "GiB" in err.value.message


def test_screen_too_coarse_for_fringes_is_flagged():
    # Nyquist: a fringe period under two screen pixels aliases (common practice, no source).
    g = model.Grating(count=50, period=2e-5, width=1e-5, height=1e-3)
    p = check(bench(g, distance=1.0, width=0.05, height=0.01, samples=64))
    v = next(v for v in p.validity if v.key == "screen_sampling")
    assert v.verdict == "invalid"
