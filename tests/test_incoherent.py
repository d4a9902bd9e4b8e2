"""Partially coherent light: fringe visibility under a broad spectrum and an extended source."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from references import reference_coherence
from scipy import special

from compute import apertures, engine, incoherent, planning, snapshot
from compute.engine import ResultCache
from compute.errors import SetupError
from compute.model import Aperture as ApertureModel
from compute.model import Numerics, Rect, Screen, Setup, Source

LAM = 600e-9
SEP = 0.5e-3  # slit centres, m
SLIT = 5e-6  # slit width: its envelope is nearly flat over the fringes we read
HEIGHT = 50e-6  # slit height: far field along y too, so the row y = 0 is one pattern
Z = 2.0


def double_slit(source: Source, *, x0: float, width: float, samples: int) -> Setup:
    """Two narrow slits, a screen strip three pixels tall centred on (x0, 0)."""
    elements = [
        Rect(x=-SEP / 2, y=0.0, width=SLIT, height=HEIGHT),
        Rect(x=SEP / 2, y=0.0, width=SLIT, height=HEIGHT),
    ]
    pitch = width / samples
    return Setup(
        source=source,
        aperture=ApertureModel(background="opaque", elements=elements),
        screen=Screen(distance=Z, width=width, height=3 * pitch, x=x0, samples=samples),
        numerics=Numerics(precision="double"),
    )


def path_difference(x: np.ndarray) -> np.ndarray:
    """Exact path difference from the two slit centres to (x, 0, Z)."""
    return np.hypot(Z, x + SEP / 2) - np.hypot(Z, x - SEP / 2)


def visibility_at(x: np.ndarray, row: np.ndarray, x0: float, wavenumber: float) -> float:
    """Fringe visibility at x0 by a least-squares fit over two fringes.

    I(x) ≈ (a + a′(x − x0)) + b cos φ + c sin φ, φ = 2π σ Δ(x); V = √(b² + c²)/a, which
    is Michelson's (I_max − I_min)/(I_max + I_min) of the local fringes (Born & Wolf,
    Principles of Optics, 7th ed., ch. 7). The fit: common practice, no source.
    """
    period = LAM * Z / SEP
    near = np.abs(x - x0) <= period
    phase = 2 * np.pi * wavenumber * path_difference(x[near])
    design = np.column_stack([np.ones(near.sum()), x[near] - x0, np.cos(phase), np.sin(phase)])
    coef, *_ = np.linalg.lstsq(design, row[near], rcond=None)
    return float(math.hypot(coef[2], coef[3]) / coef[0])


@pytest.mark.parametrize(
    ("kind", "width", "deltas"),
    [
        ("gaussian", 12e-9, (5.2e-6, 13.2e-6, 21.9e-6)),  # |γ| ≈ 0.9, 0.5, 0.15
        ("flat", 12e-9, (6e-6, 13e-6, 20e-6)),  # |γ| ≈ 0.93, 0.72, 0.41
    ],
)
def test_bandwidth_visibility_follows_the_degree_of_coherence(kind, width, deltas):
    src = Source(kind="plane", wavelength=LAM, irradiance=1.0, spectrum=kind, bandwidth=width)
    setup = double_slit(src, x0=0.05, width=0.1, samples=1000)
    res = engine.compute(setup, use_cache=False)
    samples = incoherent.route(setup)
    assert samples.spectral is not None and samples.spectral.count >= 5
    wavenumber = float(np.sum(samples.weights / samples.wavelengths))
    row = res.intensity[1]
    for delta in deltas:
        x0 = float(delta * Z / SEP)
        measured = visibility_at(res.x, row, x0, wavenumber)
        expected = reference_coherence(kind, width, float(path_difference(np.array(x0))), LAM)
        # Visibility = |γ(Δ)| of the spectrum at the path difference Δ of the position:
        # Born & Wolf, Principles of Optics, 7th ed., ch. 10; Goodman, Statistical Optics,
        # ch. 5 (temporal coherence of Gaussian and rectangular lines).
        assert measured == pytest.approx(expected, abs=0.02), (delta, measured, expected)
    # Monochromatic light of the same setup keeps full visibility there (a real contrast).
    mono = engine.compute(
        double_slit(
            Source(kind="plane", wavelength=LAM, irradiance=1.0), x0=0.05, width=0.1, samples=1000
        ),
        use_cache=False,
    )
    x_far = float(deltas[-1] * Z / SEP)
    assert visibility_at(mono.x, mono.intensity[1], x_far, 1 / LAM) > 0.97


def _centre_visibility(setup: Setup) -> float:
    res = engine.compute(setup, use_cache=False)
    return visibility_at(res.x, res.intensity[1], 0.0, 1 / LAM)


@pytest.mark.parametrize("v", [1.0, 2.5, 3.2, 5.0])
def test_source_size_visibility_follows_van_cittert_zernike(v):
    theta = v * LAM / (math.pi * SEP)
    src = Source(kind="plane", wavelength=LAM, irradiance=1.0, source_diameter=theta)
    setup = double_slit(src, x0=0.0, width=0.012, samples=600)
    assert incoherent.describe(setup)["source_route"] == "shift"
    # van Cittert–Zernike: a uniform disk of angular diameter θ gives two points d apart
    # the degree of coherence 2 J₁(v)/v, v = π d θ/λ (Born & Wolf, Principles of Optics,
    # 7th ed., ch. 10); J₁ from scipy.special.
    expected = abs(2 * special.j1(v) / v)
    assert _centre_visibility(setup) == pytest.approx(expected, abs=0.005)


@pytest.mark.parametrize("v", [2.0, 4.5])
def test_sampled_source_directions_follow_van_cittert_zernike(v):
    # A point source far away is not shift-invariant in the engine (exact spherical
    # wave), so the disk of the source is sampled in directions.
    theta = v * LAM / (math.pi * SEP)
    src = Source(kind="point", wavelength=LAM, power=1.0, distance=20.0, source_diameter=theta)
    setup = double_slit(src, x0=0.0, width=0.012, samples=600)
    info = incoherent.describe(setup)
    assert info["source_route"] == "sampled" and info["directions"] >= 8
    # Same reference as above: Born & Wolf ch. 10 (van Cittert–Zernike), scipy.special.j1.
    expected = abs(2 * special.j1(v) / v)
    assert _centre_visibility(setup) == pytest.approx(expected, abs=0.005)


def test_disk_rule_integrates_the_airy_coherence_factor():
    # ∫ over the unit disk of exp(i v s cos(φ − φ₀)) / π = 2 J₁(v)/v (the Fourier transform
    # of a uniform disk; Born & Wolf ch. 8 and 10), J₁ from scipy.special.
    for v in (0.2, 0.9, 3.0, 7.5, 18.0):
        da, db, w = incoherent.disk_directions(1.0, v)
        assert w.sum() == pytest.approx(1.0, abs=1e-12)
        assert np.all(np.hypot(da, db) <= 1.0)
        for vv in np.linspace(0.05, v, 9):
            for ang in np.linspace(0.0, np.pi, 7):
                q = np.sum(w * np.exp(1j * vv * (da * np.cos(ang) + db * np.sin(ang))))
                assert abs(q - 2 * special.j1(vv) / vv) < 2e-3


def test_shift_route_matches_the_sampled_route(monkeypatch):
    # A tilt only shifts a paraxial pattern (Goodman, Introduction to Fourier Optics,
    # 3rd ed., §4.2), so blurring by the source disk equals summing over its directions.
    theta = 2.0 * LAM / (math.pi * SEP)
    src = Source(kind="plane", wavelength=LAM, irradiance=1.0, source_diameter=theta)
    setup = double_slit(src, x0=1e-3, width=0.01, samples=500)
    exact = engine.compute(setup, use_cache=False).intensity
    monkeypatch.setattr(incoherent, "SHIFT_INVARIANT_KINDS", ())
    assert incoherent.describe(setup)["source_route"] == "sampled"
    sampled = engine.compute(setup, use_cache=False).intensity
    assert np.max(np.abs(exact - sampled)) < 5e-3 * exact.max()


def _spy_on_components(monkeypatch) -> list:
    """Record what each monochromatic component looks like when it reaches the engine.

    The sums tune one setup in place from wavelength to wavelength, so the spy keeps
    the values at the time of the call: (wavelength, spectrum, camera, x, y, grid).
    """
    seen: list = []
    original = engine.monochromatic

    def spy(setup, **kw):
        x, y = planning.screen_axes(setup)
        p = planning.plan(setup)
        grid = (p.nx, p.ny, p.dx, p.dy, p.grid_centre)
        seen.append((setup.source.wavelength, setup.source.spectrum, setup.camera, x, y, grid))
        return original(setup, **kw)

    monkeypatch.setattr(engine, "monochromatic", spy)
    return seen


def test_every_wavelength_lands_on_the_same_pixels_and_once(monkeypatch):
    src = Source(
        kind="plane",
        wavelength=LAM,
        irradiance=2.0,
        spectrum="gaussian",
        bandwidth=20e-9,
        spectral_samples=16,
    )
    setup = double_slit(src, x0=0.0, width=0.01, samples=200)
    seen = _spy_on_components(monkeypatch)
    sampled = []
    sample = apertures.quadrature_transmittance
    monkeypatch.setattr(
        apertures,
        "quadrature_transmittance",
        lambda *a, **k: sampled.append(1) or sample(*a, **k),
    )
    res = engine.compute(setup, use_cache=False)
    # One monochromatic computation per wavelength and nothing else: the cost of a
    # 16-wavelength screen is that of 16 monochromatic ones plus the sums.
    assert len(seen) == 16
    lams = sorted(s[0] for s in seen)
    assert lams == pytest.approx(list(incoherent.route(setup).wavelengths))
    x, y = planning.screen_axes(setup)
    for _, spectrum_kind, camera, sx, sy, _ in seen:
        assert np.array_equal(sx, x) and np.array_equal(sy, y)
        assert spectrum_kind == "none" and camera is None
    # The aperture is sampled once per grid the wavelengths plan, not once per wavelength.
    grids = [s[5] for s in seen]
    changes = 1 + sum(a != b for a, b in itertools.pairwise(grids))
    assert len(sampled) == changes < 16
    assert np.array_equal(res.x, x) and res.intensity.shape == (y.size, x.size)
    # Every wavelength carries its share of the same incident irradiance, so the power
    # through the aperture is that of the monochromatic beam (energy conservation,
    # common practice, no source).
    mono = engine.compute(
        _with_source(setup, Source(kind="plane", wavelength=LAM, irradiance=2.0)), use_cache=False
    )
    assert res.power_in == pytest.approx(mono.power_in, rel=1e-9)
    assert res.extras["xyz"].shape == (y.size, x.size, 3)


def _with_source(setup: Setup, src: Source) -> Setup:
    return Setup(source=src, aperture=setup.aperture, screen=setup.screen, numerics=setup.numerics)


def test_the_coherent_step_is_compute_without_the_cache_and_refuses_sums():
    mono_src = Source(kind="plane", wavelength=LAM, irradiance=1.0)
    setup = double_slit(mono_src, x0=0.0, width=0.01, samples=100)
    whole = engine.compute(setup, use_cache=False)
    step = engine.monochromatic(setup, samples={})
    assert np.array_equal(step.intensity, whole.intensity) and step.power_in == whole.power_in
    broad = _with_source(
        setup, Source(kind="plane", wavelength=LAM, spectrum="flat", bandwidth=10e-9)
    )
    with pytest.raises(ValueError, match="use compute"):
        engine.monochromatic(broad)


@pytest.mark.parametrize("block_bytes", [1, 3 * 8 * 12, 1 << 20])
def test_block_sums_equal_the_plain_weighted_sums(block_bytes):
    # One screen per block (added in place), blocks of three with a part-filled last
    # block, and everything in one block: the same sums as term by term (arithmetic,
    # common practice, no source).
    rng = np.random.default_rng(7)
    screens = rng.random((8, 3, 4))
    weights = rng.random((8, 4))
    sums = incoherent._WeightedSums((3, 4), 4, len(screens), block_bytes=block_bytes)
    for screen, w in zip(screens, weights, strict=True):
        sums.add(screen, w)
    expected = np.einsum("ki,kyx->iyx", weights, screens)
    assert np.allclose(sums.result(), expected, rtol=1e-13, atol=0)


def test_a_very_narrow_spectrum_is_the_monochromatic_pattern():
    mono_src = Source(kind="plane", wavelength=LAM, irradiance=1.0)
    setup = double_slit(mono_src, x0=0.0, width=0.01, samples=200)
    mono = engine.compute(setup, use_cache=False).intensity
    narrow = _with_source(
        setup,
        Source(kind="plane", wavelength=LAM, irradiance=1.0, spectrum="flat", bandwidth=1e-13),
    )
    broad = engine.compute(narrow, use_cache=False).intensity
    assert np.max(np.abs(broad - mono)) < 1e-5 * mono.max()
    # A 200 nm band over the same window washes the outer fringes out (a real change).
    wide_src = Source(
        kind="plane", wavelength=LAM, irradiance=1.0, spectrum="flat", bandwidth=200e-9
    )
    wide = engine.compute(_with_source(setup, wide_src), use_cache=False).intensity
    assert np.max(np.abs(wide - mono)) > 0.05 * mono.max()


def test_results_are_cached_on_the_whole_physics():
    cache = ResultCache()
    src = Source(kind="plane", wavelength=LAM, irradiance=1.0, spectrum="gaussian", bandwidth=10e-9)
    setup = double_slit(src, x0=0.0, width=0.01, samples=100)
    first = engine.compute(setup, cache=cache)
    again = engine.compute(setup, cache=cache)
    assert again.cached and np.array_equal(again.intensity, first.intensity)
    setup.source.bandwidth = 20e-9
    other = engine.compute(setup, cache=cache)
    assert not other.cached and not np.array_equal(other.intensity, first.intensity)


def test_the_report_names_the_sums():
    src = Source(
        kind="plane",
        wavelength=LAM,
        irradiance=1.0,
        spectrum="gaussian",
        bandwidth=10e-9,
        spectral_samples=3,
        source_diameter=1e-4,
    )
    setup = double_slit(src, x0=0.0, width=0.01, samples=100)
    res = engine.compute(setup, use_cache=False)
    items = {v.key: v for v in res.validity}
    spectral = items["spectral_sampling"]
    assert spectral.value == pytest.approx(3 / incoherent.route(setup).spectral.needed)
    assert spectral.verdict in ("marginal", "invalid") and "3 wavelengths" in spectral.sentence
    assert items["source_sampling"].verdict == "ok"
    assert any("incoherent sum over 3 wavelengths" in r for r in res.plan.reasons)
    assert "source_sampling" in {v.key for v in incoherent.check(setup).validity}
    assert res.meta()["validity"][-1]["value"] is None  # exact route: no finite ratio


def test_too_many_components_is_refused_with_a_message():
    src = Source(
        kind="point",
        wavelength=LAM,
        power=1.0,
        distance=1.0,
        spectrum="flat",
        bandwidth=100e-9,
        spectral_samples=200,
        source_diameter=0.05,
    )
    setup = double_slit(src, x0=0.0, width=0.01, samples=100)
    with pytest.raises(SetupError) as info:
        engine.compute(setup, use_cache=False)
    assert info.value.path == "source.source_diameter" and "limit" in info.value.message


def test_bad_spectra_are_refused_by_the_snapshot_reader():
    doc = snapshot.to_dict(double_slit(Source(), x0=0.0, width=0.01, samples=100))
    doc["source"].update(spectrum="gaussian", bandwidth=0.7 * doc["source"]["wavelength"])
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.from_dict(doc)
    assert info.value.errors[0][0] == "source.bandwidth"
    doc["source"].update(spectrum="rainbow", bandwidth=1e-8)
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.from_dict(doc)
    assert info.value.errors[0][0] == "source.spectrum"
    doc["source"].update(spectrum="flat", source_diameter=0.2)
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.from_dict(doc)
    assert info.value.errors[0][0] == "source.source_diameter"
