"""The view along the beam: irradiance on a cut y = y0 over a log grid of distances."""

from __future__ import annotations

import math

import numpy as np
import pytest

from compute import alongz, analytic, engine, model, sweep
from compute.errors import SetupError

WAVELENGTH = 5e-7
DIAMETER = 2e-4
I0 = 2.0


def circle_bench(*, clear: bool = False, precision: str = "double") -> model.Setup:
    """A 200 µm circle (or, on a clear background, an opaque disk) in a 500 nm plane wave.

    The cut is 61 pixels over 0.305 mm, so that its middle pixel sits on the axis.
    Our own numbers.
    """
    disk = model.Circle(diameter=DIAMETER, transmission=0.0 if clear else 1.0)
    return model.Setup(
        source=model.Source(wavelength=WAVELENGTH, irradiance=I0),
        aperture=model.Aperture(background="clear" if clear else "opaque", elements=[disk]),
        screen=model.Screen(width=3.05e-4, height=3.05e-4, samples=61, distance=0.05),
        numerics=model.Numerics(precision=precision),
    )


def on_axis(result: alongz.AlongZ) -> np.ndarray:
    i = int(np.argmin(np.abs(result.x)))
    assert abs(result.x[i]) < 1e-12
    return result.intensity[:, i]


@pytest.mark.parametrize("precision", ["double", "single"])
def test_on_axis_irradiance_behind_a_circle_follows_the_fresnel_zones(precision):
    # From 5 open zones (N_F = a²/(λz) = 5 at 4 mm) down to 0.2: bright on the axis for
    # an odd number of open zones, dark for an even one (Goodman, Introduction to
    # Fourier Optics, 3rd ed., §4.5.1), against the exact Rayleigh–Sommerfeld axial
    # irradiance I0 |1 − (z/R) e^{ik(R − z)}|² (compute.analytic.circle_on_axis,
    # Heurtley, JOSA 63, 1003 (1973)).
    result = alongz.along_z(circle_bench(precision=precision), z_min=4e-3, z_max=0.1, count=100)
    assert result.resolved.all()
    exact = analytic.circle_on_axis(result.z, DIAMETER, WAVELENGTH, I0, exact=True)
    got = on_axis(result)
    # Within 2 % of the bright-zone irradiance 4 I0, at every distance.
    assert np.max(np.abs(got - exact)) <= 0.02 * 4 * I0
    # The range does pass through bright and dark zones, and the computed curve has the
    # same number of bright zones (maxima) as the exact one.
    zones = analytic.open_zones(result.z, DIAMETER, WAVELENGTH, exact=True)
    assert zones.max() > 4.9 and zones.min() < 0.25
    assert exact.min() < 0.05 * I0 and exact.max() > 3.95 * I0

    def maxima(v):
        return int(np.sum((v[1:-1] > v[:-2]) & (v[1:-1] > v[2:])))

    assert maxima(got) == maxima(exact) >= 2


def test_opaque_disk_has_the_bright_spot_on_its_axis():
    # Babinet's principle (Born & Wolf, Principles of Optics, 7th ed., §8.3.2, section
    # recalled from memory) applied to the exact axial field of the circular opening
    # (Heurtley 1973) leaves U = (z/R) e^{ikR}: I = I0 z²/(z² + a²), nearly the full
    # beam in the middle of the shadow at every distance.
    result = alongz.along_z(circle_bench(clear=True), z_min=4e-3, z_max=0.1, count=40)
    assert result.resolved.all()
    a = DIAMETER / 2
    exact = I0 * result.z**2 / (result.z**2 + a**2)
    assert np.max(np.abs(on_axis(result) - exact)) <= 0.02 * I0
    # Off the axis, inside the geometric shadow, it is much darker at the nearest distance.
    inside = np.abs(result.x) < 0.6 * a
    assert result.intensity[0, inside].min() < 0.5 * I0


def test_rows_match_direct_rayleigh_sommerfeld_integration():
    # The angular spectrum is the exact scalar solution, equal to the first
    # Rayleigh–Sommerfeld integral (Goodman, Introduction to Fourier Optics, 3rd ed.,
    # §3.10 and §3.5), which engine.field_at_points sums directly.
    setup = model.Setup(
        source=model.Source(wavelength=6e-7, irradiance=10.0),
        aperture=model.Aperture(elements=[model.Rect(width=3e-4, height=2e-4, x=2e-5)]),
        screen=model.Screen(width=4e-3, height=4e-3 / 101, samples=101, distance=0.1),
        numerics=model.Numerics(precision="double"),
    )
    result = alongz.along_z(setup, count=40)
    rows = np.flatnonzero(result.resolved)
    assert rows.size >= 10  # the Fresnel zone and the far field are resolved
    px = result.x[::20]
    for k in rows[::8]:
        setup.screen.distance = float(result.z[k])
        reference = np.abs(engine.field_at_points(setup, px, np.zeros_like(px))) ** 2
        peak = result.intensity[k].max()
        assert np.max(np.abs(result.intensity[k, ::20] - reference)) <= 0.01 * peak


def test_regime_boundaries_sit_at_the_fresnel_numbers_they_claim():
    width, height, lam = 4e-4, 1e-4, 6e-7
    setup = model.Setup(
        source=model.Source(wavelength=lam, irradiance=1.0),
        aperture=model.Aperture(elements=[model.Rect(width=width, height=height)]),
        screen=model.Screen(width=2e-3, height=2e-3, samples=21),
    )
    result = alongz.along_z(setup, count=24)
    a = width / 2  # the half-width along the larger side
    near, far = result.boundaries
    # N_F = a²/(λz) (Goodman, Introduction to Fourier Optics, 3rd ed., §4.5.1); the
    # thresholds 10 and 0.1 are common practice, no source.
    assert (near.fresnel_number, far.fresnel_number) == alongz.FRESNEL_ZONE_LIMITS == (10.0, 0.1)
    assert math.isclose(float(analytic.fresnel_number(a, lam, near.z)), 10.0, rel_tol=1e-12)
    assert math.isclose(float(analytic.fresnel_number(a, lam, far.z)), 0.1, rel_tol=1e-12)
    np.testing.assert_allclose(
        result.fresnel_number, analytic.fresnel_number(a, lam, result.z), rtol=1e-12
    )
    assert np.all(result.fresnel_number[result.z < near.z] > 10.0)
    assert np.all(result.fresnel_number[result.z > far.z] < 0.1)
    # The default range runs from half the aperture size to ten Fraunhofer distances
    # 2D²/λ (Goodman §4.3), geometrically spaced, and holds both boundaries.
    assert math.isclose(result.fraunhofer_distance, 2 * width**2 / lam, rel_tol=1e-12)
    assert math.isclose(result.z[0], 0.5 * width, rel_tol=1e-12)
    assert math.isclose(result.z[-1], 10 * result.fraunhofer_distance, rel_tol=1e-12)
    np.testing.assert_allclose(result.z[1:] / result.z[:-1], result.z[1] / result.z[0])
    # 2D²/λ = 8a²/λ is where N_F = 1/8, just short of the N_F = 0.1 boundary.
    assert result.z[0] < near.z < result.fraunhofer_distance < far.z < result.z[-1]
    assert result.intensity.shape == (24, 21)


def test_a_small_grid_limit_marks_the_nearest_rows_unresolved():
    fine = alongz.plan_along_z(circle_bench(), z_min=4e-4, z_max=0.1, count=30)
    coarse = alongz.plan_along_z(circle_bench(), z_min=4e-4, z_max=0.1, count=30, max_grid=128)
    assert coarse.resolved.sum() < fine.resolved.sum()
    assert not coarse.resolved[0] and coarse.resolved[-1]
    # Once a row is resolved, every farther row is too.
    first = int(np.argmax(coarse.resolved))
    assert coarse.resolved[first:].all()


def test_progress_counts_rows_and_cancel_stops():
    calls = []
    alongz.along_z(
        circle_bench(), z_min=0.01, z_max=0.1, count=5, progress=lambda *a: calls.append(a)
    )
    assert calls == [(k, 5) for k in range(1, 6)]
    with pytest.raises(sweep.Cancelled):
        alongz.along_z(circle_bench(), z_min=0.01, z_max=0.1, count=5, cancel=lambda: True)


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({"count": 1}, "count must be a whole number"),
        ({"z_min": 0.0}, "z_min must be a positive distance"),
        ({"z_min": 0.1, "z_max": 0.05}, "must be greater than z_min"),
        ({"z_max": float("nan")}, "z_max must be a finite number"),
        ({"x": [0.0, -1e-4]}, "strictly increasing"),
        ({"max_grid": 8}, "max_grid must be"),
    ],
)
def test_bad_arguments_are_refused_with_a_clear_message(kwargs, fragment):
    with pytest.raises(ValueError, match=fragment):
        alongz.along_z(circle_bench(), **kwargs)


def test_an_unbounded_aperture_is_refused():
    setup = circle_bench()
    setup.aperture.elements = [model.Edge()]
    with pytest.raises(SetupError, match="bounded aperture") as info:
        alongz.along_z(setup, count=4)
    assert info.value.path == "aperture.elements"
