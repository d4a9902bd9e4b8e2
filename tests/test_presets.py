"""Every preset loads, round-trips, checks and renders; a few say what their notes claim."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from compute import engine, snapshot

PRESETS = Path(__file__).resolve().parent.parent / "presets"
PRESET_FILES = sorted(PRESETS.glob("*.json"))
NAMES = [p.stem for p in PRESET_FILES]


@pytest.fixture(scope="module")
def results() -> dict:
    """Rendered presets, computed once for the checks of this module."""
    return {}


def render(name: str, results: dict):
    if name not in results:
        results[name] = engine.compute(snapshot.load(PRESETS / f"{name}.json"), use_cache=False)
    return results[name]


def test_there_are_at_least_eight_scenarios_and_a_default():
    assert "default" in NAMES
    assert len([n for n in NAMES if n != "default"]) >= 8


@pytest.mark.parametrize("path", PRESET_FILES, ids=NAMES)
def test_preset_loads_with_title_and_note(path):
    setup = snapshot.load(path)
    assert isinstance(setup.meta.get("title"), str) and setup.meta["title"].strip()
    note = setup.meta.get("note")
    assert isinstance(note, str) and "Try" in note  # what it shows and what to try
    assert setup.check() == []


@pytest.mark.parametrize("path", PRESET_FILES, ids=NAMES)
def test_preset_round_trips_exactly(path):
    text = path.read_text(encoding="utf-8")
    setup = snapshot.load(path)
    assert snapshot.dumps(setup) + "\n" == text  # file -> setup -> file is the identity
    doc = json.loads(text)
    assert snapshot.to_dict(snapshot.from_dict(doc)) == doc
    again = snapshot.from_dict(snapshot.to_dict(setup))
    assert snapshot.to_dict(again) == snapshot.to_dict(setup)
    assert snapshot.physics_hash(again) == snapshot.physics_hash(snapshot.load(path))


def test_presets_are_different_setups():
    hashes = {snapshot.physics_hash(snapshot.load(p)) for p in PRESET_FILES}
    assert len(hashes) == len(PRESET_FILES)


@pytest.mark.parametrize("path", PRESET_FILES, ids=NAMES)
def test_preset_checks(path):
    plan = engine.check(snapshot.load(path))
    assert math.isfinite(plan.fresnel_number) and plan.fresnel_number > 0
    assert plan.validity
    assert {item.verdict for item in plan.validity} <= {"ok", "marginal", "invalid"}
    # Demo scenarios should sit where their method holds.
    assert [i.key for i in plan.validity if i.verdict == "invalid"] == []


@pytest.mark.parametrize("name", NAMES)
def test_preset_renders(name, results):
    setup = snapshot.load(PRESETS / f"{name}.json")
    result = render(name, results)
    assert result.intensity.shape == setup.screen.shape_px()
    assert result.intensity.dtype == np.float64
    assert np.all(np.isfinite(result.intensity))
    assert result.intensity.min() >= 0.0
    dx = np.diff(result.x).mean()
    dy = np.diff(result.y).mean() if result.y.size > 1 else dx
    assert float(result.intensity.sum() * dx * dy) > 0.0  # power on the screen, W


def test_default_is_a_double_slit_on_a_screen_one_to_two_metres_away():
    setup = snapshot.load(PRESETS / "default.json")
    assert [el.shape for el in setup.aperture.elements] == ["rect", "rect"]
    assert setup.aperture.background == "opaque"
    assert 1.0 <= setup.screen.distance <= 2.0


def _central_row(result):
    return result.intensity[int(np.argmin(np.abs(result.y))), :]


def _local_extrema(x, v, *, maxima: bool):
    s = v if maxima else -v
    k = np.flatnonzero((s[1:-1] > s[:-2]) & (s[1:-1] >= s[2:])) + 1
    return x[k]


def test_default_fringe_period_is_lambda_z_over_d(results):
    # Young's double slit: bright fringes every λz/d (Hecht, Optics, 5th ed., §9.3).
    setup = snapshot.load(PRESETS / "default.json")
    a, b = setup.aperture.elements
    period = setup.source.wavelength * setup.screen.distance / abs(b.x - a.x)
    result = render("default", results)
    peaks = _local_extrema(result.x, _central_row(result), maxima=True)
    near = np.sort(peaks[np.abs(peaks) < 2.5 * period])
    assert len(near) == 5
    measured = (near[-1] - near[0]) / 4
    assert measured == pytest.approx(period, rel=0.02)


def test_lens_airy_first_dark_ring(results):
    # Airy pattern: first zero at 1.22 λf/D (Born & Wolf, Principles of Optics, 7th ed.,
    # §8.5.2; the root 3.8317 of J1 from scipy.special.jn_zeros).
    from scipy.special import jn_zeros

    setup = snapshot.load(PRESETS / "lens-airy.json")
    (disk,) = setup.aperture.elements
    f = setup.screen.lens_focal_length
    expected = jn_zeros(1, 1)[0] / math.pi * setup.source.wavelength * f / disk.diameter
    result = render("lens-airy", results)
    row = _central_row(result)
    right = result.x > 0
    minima = _local_extrema(result.x[right], row[right], maxima=False)
    assert minima[0] == pytest.approx(expected, rel=0.03)


def test_wire_dark_fringes_follow_babinet(results):
    # Babinet's principle (Born & Wolf, 7th ed., §8.3.2): away from the direct beam the
    # wire diffracts like a slit of width d, whose zeros lie at m λz/d (Hecht, 5th ed.,
    # §10.2.1, single slit in the far field).
    setup = snapshot.load(PRESETS / "wire-diameter.json")
    (wire,) = setup.aperture.elements
    step = setup.source.wavelength * setup.screen.distance / wire.width
    result = render("wire-diameter", results)
    row = _central_row(result)
    minima = _local_extrema(result.x, row, maxima=False)
    for m in (2, 3):  # outside the direct beam (1/e² radius ≈ 0.6 mm)
        nearest = minima[np.argmin(np.abs(minima - m * step))]
        assert nearest == pytest.approx(m * step, rel=0.03)


def test_talbot_self_image(results):
    # Talbot self-image at z_T = 2d²/λ (Lord Rayleigh, Phil. Mag. 11, 196 (1881); reference
    # recalled from memory): bright where the openings are, dark behind the bars.
    setup = snapshot.load(PRESETS / "talbot-grating.json")
    (grating,) = setup.aperture.elements
    d = grating.period
    assert setup.screen.distance == pytest.approx(2 * d**2 / setup.source.wavelength, rel=1e-3)
    result = render("talbot-grating", results)
    row = _central_row(result)
    # Opening centres of an even count sit at half-integer multiples of the period.
    k = np.arange(-4, 4) + 0.5
    at_openings = np.interp(k * d, result.x, row)
    at_bars = np.interp((k + 0.5) * d, result.x, row)
    assert at_openings.min() > 5 * at_bars.max()
