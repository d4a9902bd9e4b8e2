"""The page's words and what a person is offered: refusals, labels, hints, presets, fixes.

No browser: the dashboards compute in the calling thread. The setups here are
demo values (invented data), except the presets, which are the repository's.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from compute import snapshot
from compute.alongz import AlongZ, AlongZPlan
from compute.errors import SetupError
from compute.model import Circle, Rect, Setup
from server import alongz_view, controls, wording
from server.app import list_presets, load_preset
from server.dashboard import Dashboard, failure_message
from server.sweep_panel import VALIDITY_MARKS, Sweepable, sweep_view

# ------------------------------------------------------------------ numbers and words


@pytest.mark.parametrize(
    ("value", "text"),
    [
        (0.00617, "0.00617"),
        (5.0, "5"),
        (0.5, "0.5"),
        (12.3456789, "12.35"),
        (1e6, "1000000"),
        (2.5e-7, "2.5e-07"),
        (0.0, "0"),
    ],
)
def test_numbers_keep_their_significant_digits_and_drop_trailing_zeros(value, text):
    assert wording.number(value) == text


@pytest.mark.parametrize(
    ("metres", "text"),
    [(0.00617, "6.17 mm"), (1.2, "1.2 m"), (0.1, "0.1 m"), (4e-5, "40 µm"), (2e-4, "0.2 mm")],
)
def test_lengths_below_a_tenth_of_a_metre_are_in_mm_or_um(metres, text):
    assert wording.length(metres) == text


def test_a_refusal_names_the_label_the_bound_and_the_kept_value():
    say = wording.refusal
    assert say("Distance", "m", 0.0, 1e-10, 1e6, current=1.2) == (
        "Distance must be more than 0 m; it stays at 1.2 m"
    )
    assert say("Pixels across", "", 100000, 2, 4096) == "Pixels across must be at most 4096"
    assert say("Fill factor", "", 0.0, 0.0, 1.0, lower_open=True) == (
        "Fill factor must be more than 0"
    )
    assert say("Bit depth", "", 0, 1, 32) == "Bit depth must be at least 1"
    assert say("Height", "µm", None, 1e-4, 1e9, current=3000) == (
        "Height needs a number; it stays at 3000 µm"
    )
    assert say("Height", "µm", float("nan"), 1e-4, 1e9) == "Height needs a number"
    assert say("Height", "µm", 50.0, 1e-4, 1e9) is None


def test_snapshot_paths_read_as_the_labels_on_the_page():
    label = controls.path_label
    assert label("screen.samples") == "Pixels across"
    assert label("screen.distance") == "Screen distance"
    assert label("numerics.grid") == "Aperture grid"
    assert label("aperture.elements[1].width") == "element 2 width"
    assert label("aperture.elements[0].inner_diameter") == "element 1 inner diameter"
    assert label("camera.pixels_x") == "Pixels across (x)"
    assert label("not.a.path") == "not.a.path"
    text = "needs 47 GiB; lower numerics.grid, or screen.samples (aperture.elements[0].width)"
    assert wording.plain(text, label) == (
        "needs 47 GiB; lower “Aperture grid”, or “Pixels across” (“element 1 width”)"
    )


def test_a_core_failure_is_said_with_labels_and_offers_its_fix():
    exc = SetupError("numerics.grid", "the computation needs 40 GiB; lower numerics.grid")
    assert (
        failure_message(exc)
        == "“Aperture grid”: the computation needs 40 GiB; lower “Aperture grid”"
    )
    fix = wording.fix_for(exc.path, str(exc), grid=8192)
    assert fix == wording.Fix("Set grid to automatic", "numerics.grid", 0)
    assert wording.fix_for(exc.path, str(exc), grid=0) is None  # already automatic
    rs = SetupError("numerics.method", "direct Rayleigh–Sommerfeld integration would sum …")
    assert wording.fix_for(rs.path, str(rs), grid=0).value == "auto"


def test_missing_readings_are_named():
    full = {
        "peak": 1.0,
        "peak_x": 0.0,
        "first_min_left": -1e-3,
        "first_min_right": 1e-3,
        "central_lobe_x": 2e-3,
        "central_lobe_y": 2e-3,
    }
    assert wording.missing_readings(full) == []
    cut = dict(full, first_min_right=None, central_lobe_x=None, central_lobe_y=None)
    assert wording.missing_readings(cut) == [
        "the first minima along x fall outside the window",
        "the central lobe along x and y is wider than the window",
    ]
    assert wording.missing_readings(dict(full, peak=0.0, first_min_left=None)) == []


def test_the_longest_exposure_scales_the_brightest_pixel_to_the_full_well():
    # The linear camera model: photoelectrons grow in proportion to the exposure
    # (EMVA 1288 release 4.0, §2).
    assert wording.longest_exposure(1e-3, 5000.0, 20000.0) == pytest.approx(4e-3)
    assert wording.longest_exposure(1e-3, 0.0, 20000.0) is None


# --------------------------------------------------------------------- the dashboard


def _slit() -> Setup:
    """Demo setup: one 100 µm slit, 633 nm, screen at 1 m (invented data)."""
    s = Setup()
    s.source.wavelength = 6.33e-7
    s.aperture.elements = [Rect(width=1e-4, height=1e-3)]
    s.screen.distance = 1.0
    s.screen.width = 0.03
    s.screen.height = 0.01
    s.screen.samples = 120
    return s


def test_a_narrow_window_says_which_readings_are_missing_and_widens_on_request():
    s = _slit()
    s.screen.width = 0.004  # the first zeros of a 100 µm slit at 1 m are at ±6.3 mm
    s.screen.height = 0.004
    d = Dashboard(s, threaded=False)
    assert d.reading_hint.visible
    assert "first minima along x fall outside" in d.reading_hint_text.object
    assert d.widen_window()
    assert d.setup.screen.width == pytest.approx(0.008)
    assert d.widen_window()
    # λz/a = 6.33 mm either side: inside a 16 mm window (Fraunhofer slit: Goodman,
    # Introduction to Fourier Optics, 3rd ed., §4.4.1).
    assert not d.reading_hint.visible, d.reading_hint_text.object


def test_the_dashboard_refuses_an_empty_box_and_keeps_the_value():
    d = Dashboard(_slit(), threaded=False)
    before = snapshot.physics_hash(d.setup)
    assert not d.set_value("screen.samples", None)
    assert d.messages[-1] == ("error", "Pixels across needs a number; it stays at 120")
    assert snapshot.physics_hash(d.setup) == before


def test_a_failure_is_said_once_offers_its_fix_and_the_fix_works(monkeypatch):
    d = Dashboard(_slit(), threaded=False)
    assert d.set_value("numerics.grid", 512)
    from compute import engine

    real = engine.compute

    def refuse(setup, **kw):
        if setup.numerics.grid:
            raise SetupError(
                "numerics.grid",
                f"the computation needs about {setup.screen.distance * 40:.3g} GiB, over the "
                "2 GiB limit; lower numerics.grid",
            )
        return real(setup, **kw)

    monkeypatch.setattr(engine, "compute", refuse)
    good = d.result
    n = len(d.messages)
    assert d.set_value("screen.distance", 2.0)
    assert d.result is good and d.problem_bar.visible
    assert "numerics.grid" not in d.last_error and "“Aperture grid”" in d.last_error
    assert d.fix_button.visible and d.fix_button.name == "Set grid to automatic"
    errors = [m for m in d.messages[n:] if m[0] == "error"]
    assert len(errors) == 1
    # The same failure (other numbers) after another edit: no second notification.
    assert d.set_value("screen.distance", 3.0)
    assert [m for m in d.messages[n:] if m[0] == "error"] == errors
    d._apply_fix()
    assert d.setup.numerics.grid == 0
    assert d.result is not good and not d.problem_bar.visible and d.last_error == ""


def test_a_dismissed_failure_is_not_raised_again(monkeypatch):
    d = Dashboard(_slit(), threaded=False)
    from compute import engine

    def refuse(setup, **kw):
        raise SetupError("screen.samples", f"too many samples ({setup.screen.distance:g})")

    monkeypatch.setattr(engine, "compute", refuse)
    d.set_value("screen.distance", 2.0)
    assert d.problem_bar.visible
    d._dismiss_failure()
    n = len(d.messages)
    d.set_value("screen.distance", 2.5)
    assert not d.problem_bar.visible
    assert [m for m in d.messages[n:] if m[0] == "error"] == []


# -------------------------------------------------------------------------- presets


def test_the_chooser_names_the_loaded_preset_and_its_note_is_shown():
    presets = list_presets()
    d = Dashboard(load_preset(None), threaded=False, presets=presets)
    default = load_preset(None)
    title = default.meta["title"]
    assert d.preset_picker.value == title and d.preset_loaded == title
    assert d.preset_note.visible and default.meta["note"][:40] in d.preset_note.object
    other = next(t for t in presets if t != title)
    d.preset_picker.value = other
    assert d.preset_loaded == other and d.preset_picker.value == other
    note = snapshot.load(presets[other]).meta["note"]
    assert note[:40].replace("'", "&#x27;") in d.preset_note.object or note[:20] in (
        d.preset_note.object
    )


def test_an_edited_preset_exports_as_edited_or_with_the_users_own_words():
    presets = list_presets()
    d = Dashboard(load_preset(None), threaded=False, presets=presets)
    title = d.preset_loaded
    assert json.loads(d.export_snapshot())["meta"]["title"] == title  # unchanged: as it is
    assert d.set_value("screen.distance", 2.0)
    assert d.preset_edited
    assert d.preset_picker.options.get(f"{title} (edited)") == ""
    meta = json.loads(d.export_snapshot())["meta"]
    assert meta["title"] == f"edited from: {title}"
    assert title in meta["note"] and "not describe this setup" in meta["note"]
    assert "edited from" in d.preset_note.object
    # The user's own title and note go out as written and survive later edits.
    d.title_input.value = "Slits at 2 m"
    d.note_input.value = "Our bench, Tuesday."
    assert d.set_value("screen.distance", 2.1)
    meta = json.loads(d.export_snapshot())["meta"]
    assert (meta["title"], meta["note"]) == ("Slits at 2 m", "Our bench, Tuesday.")
    # Back to the preset's own values: no longer edited.
    d.title_input.value = ""
    d._own_meta = False
    assert d.set_value("screen.distance", load_preset(None).screen.distance)
    assert not d.preset_edited and d.preset_picker.value == title


def test_every_preset_note_names_controls_as_the_page_shows_them():
    from compute.model import ELEMENT_TYPES, Camera, Numerics, Screen, Source

    names = {
        n
        for cls in (Source, Screen, Numerics, Camera, *ELEMENT_TYPES.values())
        for n in cls.param
        if "_" in n
    }
    for title, path in list_presets().items():
        note = snapshot.load(path).meta.get("note", "")
        assert len(note) > 80 and "Try" in note, title
        # No snapshot names of settings (inner_diameter, waist_offset): the labels.
        assert not [n for n in names if n in note], (title, note)


# ------------------------------------------------------------------- along the beam


def test_the_cut_holds_the_aperture_and_a_sample_on_the_axis():
    s = Setup()
    s.aperture.elements = [Circle(diameter=2e-3)]
    s.screen.width = s.screen.height = 4e-4  # a lens focus: narrower than the aperture
    x = alongz_view._cut_positions(s)
    assert x[0] <= -1.5e-3 and x[-1] >= 1.5e-3
    assert np.min(np.abs(x)) == 0.0
    assert x.size <= alongz_view.POINTS_X + 1
    assert np.allclose(np.diff(x), x[1] - x[0])


def _az(intensity: np.ndarray, x: np.ndarray, z: np.ndarray, resolved, box) -> AlongZ:
    plan = AlongZPlan(
        z=z,
        x=x,
        y0=0.0,
        pitch=(1e-6, 1e-6),
        samples=(4, 4),
        half_width=5e-5,
        lit_box=box,
        babinet=False,
        segments=[],
        resolved=np.asarray(resolved, bool),
        fresnel_number=np.ones(z.size),
        memory_bytes=0,
    )
    return AlongZ(
        z=z,
        x=x,
        y0=0.0,
        intensity=intensity,
        fresnel_number=np.ones(z.size),
        boundaries=[],
        fraunhofer_distance=1.0,
        resolved=np.asarray(resolved, bool),
        plan=plan,
        elapsed_s=0.0,
    )


def test_the_image_frames_the_light_and_the_aperture_not_the_window():
    x = np.linspace(-10e-3, 10e-3, 201)
    z = np.geomspace(1e-3, 1.0, 5)
    intensity = np.where(np.abs(x) <= 1.05e-3, 1.0, 0.0)[None, :] * np.ones((5, 1))
    az = _az(intensity, x, z, [True] * 5, (-5e-5, 5e-5, -5e-5, 5e-5))
    lo, hi = alongz_view.beam_frame(az)
    assert -1.3e-3 < lo < -1e-3 and 1e-3 < hi < 1.3e-3
    assert alongz_view.unresolved_runs(_az(intensity, x, z, [0, 0, 1, 0, 1], None)) == [
        (0, 2),
        (3, 4),
    ]


def test_the_screen_marker_is_clamped_and_labelled_beyond_the_range():
    at, label = alongz_view.marker_position(400.0, (1e-3, 30.0))
    assert at == pytest.approx(math.log10(30.0)) and label == "screen at 400 m ▸"
    at, label = alongz_view.marker_position(1e-4, (1e-3, 30.0))
    assert at == pytest.approx(-3.0) and label.startswith("◂ screen at")
    assert alongz_view.marker_position(1.0, (1e-3, 30.0)) == (0.0, "")


# -------------------------------------------------------------------------- the sweep


def test_sweep_points_with_a_doubtful_report_are_marked_and_log_y_is_offered():
    axis = Sweepable("screen.distance", "screen distance", "m", 1.0, False)
    rows = [
        {"method": "fresnel", "peak_irradiance": 5.0, "validity": "ok"},
        {"method": "fresnel", "peak_irradiance": 3.0, "validity": "marginal"},
        {"method": "fraunhofer", "peak_irradiance": 1.0, "validity": "invalid"},
    ]
    view = sweep_view([(axis, [1.0, 2.0, 3.0], False)], rows, "peak_irradiance", logy=True)
    marks = {
        el.label: list(el.dimension_values("sweep_x"))
        for el in view
        if el.label in {m["label"] for m in VALIDITY_MARKS.values()}
    }
    assert marks == {
        VALIDITY_MARKS["marginal"]["label"]: [2.0],
        VALIDITY_MARKS["invalid"]["label"]: [3.0],
    }
    from holoviews import Store

    opts = Store.lookup_options("bokeh", next(iter(view)), "plot").kwargs
    assert opts.get("logy") is True


def test_a_short_screen_distance_is_also_shown_in_mm():
    s = _slit()
    s.screen.distance = 0.00617
    d = Dashboard(s, threaded=False)
    w = d.controls.screen["distance"].widget
    assert w.label == "Distance (m) = 6.17 mm"
    assert w.format == controls.NUMBER_FORMAT == "0.[000000]"  # 0.00617, not 0.006
    assert d.set_value("screen.distance", 1.5)
    assert w.label == "Distance (m)"
