"""Spectra: samples, weights, the complex degree of coherence, and the snapshot keys."""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate

from compute import snapshot, spectrum
from compute.model import Source

ROOT = Path(__file__).resolve().parent.parent
PRESETS = sorted((ROOT / "presets").glob("*.json"))


@pytest.mark.parametrize("kind", ["gaussian", "flat"])
@pytest.mark.parametrize("rel", [0.005, 0.05, 0.3])
def test_density_has_unit_area_over_its_support(kind, rel):
    lam0 = 650e-9
    lo, hi = spectrum.support(kind, lam0, rel * lam0)
    # Normalisation checked by scipy.integrate.quad (a reference library).
    area = integrate.quad(
        lambda x: float(spectrum.density(kind, lam0, rel * lam0, x)), lo, hi, epsabs=0, epsrel=1e-10
    )[0]
    assert area == pytest.approx(1.0, rel=1e-9)
    assert spectrum.density(kind, lam0, rel * lam0, hi * 1.001) == 0.0
    if kind == "gaussian":  # the FWHM is the bandwidth (definition of the line width)
        peak = spectrum.density(kind, lam0, rel * lam0, lam0)
        half = spectrum.density(kind, lam0, rel * lam0, lam0 + rel * lam0 / 2)
        assert half / peak == pytest.approx(0.5, rel=1e-12)


@pytest.mark.parametrize("kind", ["gaussian", "flat"])
def test_degree_of_coherence_matches_direct_integration(kind):
    lam0, width = 800e-9, 40e-9
    lo, hi = spectrum.support(kind, lam0, width)
    for delta in (0.0, 3e-6, 11e-6, 25e-6):
        # γ(Δ) = ∫ S(λ) exp(2πiΔ/λ) dλ (Born & Wolf, Principles of Optics, 7th ed., ch. 10),
        # integrated here by scipy.integrate.quad.
        def part(f, delta=delta):
            return integrate.quad(
                lambda x: float(spectrum.density(kind, lam0, width, x)) * f(2 * np.pi * delta / x),
                lo,
                hi,
                limit=400,
                epsabs=1e-13,
                epsrel=1e-11,
            )[0]

        expected = complex(part(math.cos), part(math.sin))
        got = complex(spectrum.degree_of_coherence(kind, lam0, width, delta))
        assert abs(got - expected) < 1e-9


@pytest.mark.parametrize("kind", ["gaussian", "flat"])
def test_narrow_lines_have_the_textbook_coherence(kind):
    lam0, width = 550e-9, 1e-9  # 0.2 %: the narrow-band limit
    lc = lam0**2 / width
    deltas = np.linspace(0.0, 1.5 * lc, 31)
    exact = np.abs(spectrum.degree_of_coherence(kind, lam0, width, deltas))
    # Gaussian line: |γ| = exp(−(πΔσΔ)²/(4 ln 2)); rectangular line: |sinc(ΔσΔ)|
    # (Goodman, Statistical Optics, ch. 5, temporal coherence of line shapes).
    dsig = width / lam0**2
    if kind == "gaussian":
        textbook = np.exp(-((np.pi * dsig * deltas) ** 2) / (4 * math.log(2)))
    else:
        textbook = np.abs(np.sinc(dsig * deltas))
    assert np.max(np.abs(exact - textbook)) < 2e-3
    assert np.allclose(spectrum.narrowband_coherence(kind, lam0, width, deltas), textbook)
    assert exact[-1] < 0.25  # the fringes do fade within 1.5 coherence lengths


@pytest.mark.parametrize("kind", ["gaussian", "flat"])
@pytest.mark.parametrize(("rel", "path"), [(0.01, 30e-6), (0.05, 10e-6), (0.1, 60e-6)])
def test_automatic_samples_hold_the_coherence_over_the_path_differences(kind, rel, path):
    lam0 = 600e-9
    s = spectrum.sample(kind, lam0, rel * lam0, path_difference=path, max_auto=1000)
    assert s.auto and s.count == s.needed and s.weights.sum() == pytest.approx(1.0)
    assert np.all(np.diff(s.wavelengths) > 0) and np.all(s.weights > 0)
    lo, hi = spectrum.support(kind, lam0, rel * lam0)
    assert lo < s.wavelengths[0] and s.wavelengths[-1] < hi
    deltas = np.linspace(0.0, path, 300)
    sampled = np.abs(np.exp(2j * np.pi * np.outer(deltas, 1 / s.wavelengths)) @ s.weights)
    exact = np.abs(spectrum.degree_of_coherence(kind, lam0, rel * lam0, deltas))
    # The sampled spectrum's coherence follows the exact one (Born & Wolf ch. 10) to the
    # stated tolerance wherever the screen looks.
    assert np.max(np.abs(sampled - exact)) <= spectrum.COHERENCE_TOLERANCE * 1.5


def test_more_path_difference_needs_more_samples_and_counts_are_honoured():
    needs = [spectrum.needed_samples("flat", 600e-9, 30e-9, d) for d in (1e-6, 1e-5, 1e-4)]
    assert needs[0] < needs[1] < needs[2]
    assert spectrum.sample("flat", 600e-9, 30e-9, count=7).count == 7
    capped = spectrum.sample("flat", 600e-9, 30e-9, path_difference=1e-3, max_auto=40)
    assert capped.count == 40 and capped.needed > 40
    one = spectrum.sample("gaussian", 600e-9, 30e-9, count=1)
    assert one.wavelengths.tolist() == [600e-9] and one.weights.tolist() == [1.0]
    stepped = spectrum.sample("flat", 580e-9, 400e-9, max_step=20e-9)
    assert stepped.count == 20  # a white band keeps 20 nm steps for its colour


def test_bad_spectra_are_refused():
    with pytest.raises(ValueError, match="spectrum"):
        spectrum.sample("lorentzian", 600e-9, 1e-9)
    with pytest.raises(ValueError, match="bandwidth"):
        spectrum.sample("flat", 600e-9, 0.0)
    with pytest.raises(ValueError, match="reaches"):
        spectrum.sample("flat", 600e-9, 1.3e-6)
    assert Source(wavelength=600e-9, spectrum="gaussian", bandwidth=0.61 * 600e-9).check()
    assert Source(wavelength=600e-9, spectrum="flat", bandwidth=0.95e-6).check()
    assert not Source(wavelength=600e-9, spectrum="flat", bandwidth=0.8e-6).check()
    assert not Source(wavelength=600e-9, spectrum="none", bandwidth=1e-3).check()


# -- the snapshot keys ----------------------------------------------------------------


@pytest.mark.parametrize("path", PRESETS, ids=[p.stem for p in PRESETS])
def test_snapshots_without_the_new_keys_keep_bytes_and_hash(path):
    text = path.read_text(encoding="utf-8")
    doc = json.loads(text)
    setup = snapshot.loads(text)
    assert snapshot.dumps(setup) + "\n" == text
    # The hash of a version-1 snapshot as first specified: the four physics sections,
    # every key, sorted, compact (shared/SNAPSHOT.md).
    first = json.dumps(
        {k: doc[k] for k in ("source", "aperture", "screen", "numerics")},
        sort_keys=True,
        separators=(",", ":"),
        ensure_ascii=True,
    )
    assert snapshot.physics_hash(setup) == hashlib.sha256(first.encode("ascii")).hexdigest()


def test_new_source_keys_are_written_only_when_set():
    setup = snapshot.load(PRESETS[0])
    before = snapshot.physics_hash(setup)
    setup.source.spectrum = "gaussian"
    setup.source.bandwidth = 25e-9
    setup.source.spectral_samples = 9
    setup.source.source_diameter = 2e-3
    doc = snapshot.to_dict(setup)
    assert doc["source"]["spectrum"] == "gaussian" and doc["source"]["spectral_samples"] == 9
    assert snapshot.to_dict(snapshot.from_dict(doc)) == doc
    changed = snapshot.physics_hash(setup)
    assert changed != before
    setup.source.spectrum, setup.source.bandwidth = "none", Source.param.bandwidth.default
    setup.source.spectral_samples, setup.source.source_diameter = 0, 0.0
    assert snapshot.physics_hash(setup) == before
    assert not set(snapshot.to_dict(setup)["source"]) & {"spectrum", "source_diameter"}


@pytest.mark.parametrize(
    ("key", "value", "fragment"),
    [
        ("spectrum", "white", 'expected one of "none", "gaussian", "flat"'),
        ("bandwidth", -1e-9, "in [0, 0.001] m"),
        ("spectral_samples", 2.5, "an integer"),
        ("spectral_samples", 1000, "in [0, 256]"),
        ("source_diameter", True, "a number"),
    ],
)
def test_bad_source_keys_name_their_path(key, value, fragment):
    doc = snapshot.to_dict(snapshot.load(PRESETS[0]))
    doc["source"][key] = value
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.from_dict(doc)
    path, message = info.value.errors[0]
    assert path == f"source.{key}" and fragment in message
