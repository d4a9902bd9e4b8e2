"""The dashboard object without a browser: edits, display settings, failures, import, links.

The dashboards here compute in the calling thread (``threaded=False``) or on the
worker pool followed by ``wait()``; no server and no browser are involved.
"""

from __future__ import annotations

import json
import math

import numpy as np
import param
import pytest
from bokeh.models import GlyphRenderer

from compute import analytic, engine, snapshot
from compute.errors import SetupError
from compute.model import Grating, Rect, Setup
from server import urlstate, views
from server.app import list_presets, load_preset
from server.controls import parse_vertices, to_display, to_si
from server.dashboard import Dashboard


def _double_slit() -> Setup:
    """Demo setup: two 50 µm slits 250 µm apart, 633 nm, screen at 2 m (invented data)."""
    s = Setup()
    s.source.wavelength = 6.33e-7
    s.aperture.elements = [
        Rect(x=-1.25e-4, width=5e-5, height=1e-3),
        Rect(x=1.25e-4, width=5e-5, height=1e-3),
    ]
    s.screen.distance = 2.0
    s.screen.width = 0.03
    s.screen.height = 0.01
    s.screen.samples = 240
    return s


def _release(slider, value: float) -> None:
    """What a browser does when a slider handle is released at ``value``."""
    with param.edit_constant(slider):
        slider.param.update(value=value, value_throttled=value)


@pytest.fixture
def dash() -> Dashboard:
    d = Dashboard(_double_slit(), threaded=False)
    assert d.result is not None, d.messages
    return d


# ------------------------------------------------------------------ unit handling


def test_display_units_convert_to_si_and_back():
    # Unit factors: SI prefixes (BIPM SI Brochure, 9th ed., table 7).
    assert to_si(632.8, "nm") == pytest.approx(6.328e-7, rel=1e-12)
    assert to_si(50.0, "µm") == pytest.approx(5e-5, rel=1e-12)
    assert to_si(2.5, "mW") == pytest.approx(2.5e-3, rel=1e-12)
    assert to_si(90.0, "°") == pytest.approx(math.pi / 2, rel=1e-12)
    assert to_display(1e-4, "mm") == 0.1  # float noise rounded away
    assert to_display(to_si(123.456, "µm"), "µm") == 123.456


def test_vertex_text_parses_to_metres_and_names_a_bad_vertex():
    assert parse_vertices("0, 0; 100, 0; 0 50") == [[0.0, 0.0], [1e-4, 0.0], [0.0, 5e-5]]
    with pytest.raises(ValueError, match="vertex 2"):
        parse_vertices("0,0; 1; 2,2")


def test_a_control_change_reaches_the_setup_in_si_units(dash):
    c = dash.controls.source["wavelength"]  # a slider in nm
    assert c.widget.value == pytest.approx(633.0)
    old_key = dash.result.key
    _release(c.widget, 532.0)
    assert dash.setup.source.wavelength == pytest.approx(5.32e-7, rel=1e-12)
    assert dash.result.key != old_key
    assert dash.result.key == snapshot.physics_hash(dash.setup)


def test_distance_control_recomputes_a_different_pattern(dash):
    before = dash.result.intensity.max()
    w = dash.controls.screen["distance"].widget
    _release(w, 4.0)
    assert dash.setup.screen.distance == 4.0
    # Far-field peak scales as 1/z² (Goodman, Introduction to Fourier Optics, 3rd ed., §4.3):
    # doubling the distance quarters the peak irradiance.
    assert dash.result.intensity.max() == pytest.approx(before / 4, rel=0.05)


def test_element_width_edit_in_micrometres(dash):
    width = next(c for c in dash._editor_controls if c.path.endswith(".width"))
    width.widget.value = 80.0
    assert dash.setup.aperture.elements[0].width == pytest.approx(8e-5, rel=1e-12)
    assert dash.setup.aperture.elements[1].width == pytest.approx(5e-5)


def test_out_of_range_value_is_refused_in_the_controls_words_and_changes_nothing(dash):
    before = snapshot.physics_hash(dash.setup)
    runs = dash.computations
    assert not dash.set_value("screen.distance", -1.0)
    level, text = dash.messages[-1]
    # The control's label and unit, not the snapshot path; and the value it keeps.
    assert level == "error" and text == "Distance must be more than 0 m; it stays at 2 m"
    assert snapshot.physics_hash(dash.setup) == before
    assert dash.computations == runs
    # The widget shows the committed value again.
    assert dash.controls.screen["distance"].widget.value == pytest.approx(2.0)


def test_cross_parameter_rule_is_refused(dash):
    dash.add_element("grating")
    i = len(dash.setup.aperture.elements) - 1
    before = snapshot.physics_hash(dash.setup)
    assert not dash.set_value(f"aperture.elements[{i}].width", 1e-3)  # wider than its period
    assert "period" in dash.messages[-1][1]
    assert snapshot.physics_hash(dash.setup) == before


def test_elements_add_reorder_duplicate_and_delete(dash):
    assert dash.add_element("circle")
    assert [e.shape for e in dash.setup.aperture.elements] == ["rect", "rect", "circle"]
    assert dash.selected == 2
    assert dash.move_element(2, -1)
    assert [e.shape for e in dash.setup.aperture.elements] == ["rect", "circle", "rect"]
    assert dash.duplicate_element(1)
    assert [e.shape for e in dash.setup.aperture.elements] == ["rect", "circle", "circle", "rect"]
    assert dash.remove_element(0)
    assert [e.shape for e in dash.setup.aperture.elements] == ["circle", "circle", "rect"]
    assert len(dash.element_table.value) == 3
    assert list(dash.element_table.value["shape"]) == ["circle", "circle", "rect"]


def test_every_shape_can_be_added_and_computed(dash):
    shape_keys = {
        "rect": "height",
        "circle": "diameter",
        "annulus": "inner_diameter",
        "grating": "count",
        "edge": "angle",
        "polygon": "angle",
        "image": "width",
    }
    for shape, key in shape_keys.items():
        assert dash.add_element(shape), dash.messages[-1]
        assert dash.setup.aperture.elements[-1].shape == shape
        i = len(dash.setup.aperture.elements) - 1
        assert any(c.path == f"aperture.elements[{i}].{key}" for c in dash._editor_controls)
        # Either this very setup was computed, or the failure says why in words.
        assert dash.result.key == snapshot.physics_hash(dash.setup) or dash.last_error


def test_bad_polygon_text_is_refused(dash):
    dash.add_element("polygon")
    i = len(dash.setup.aperture.elements) - 1
    before = snapshot.physics_hash(dash.setup)
    assert not dash.set_value(f"aperture.elements[{i}].vertices", "0,0; 1,1")
    assert "3 vertices" in dash.messages[-1][1]
    assert dash.set_value(f"aperture.elements[{i}].vertices", "0,0; 100,0; 0,100")
    assert snapshot.physics_hash(dash.setup) != before


def test_background_switch(dash):
    dash.controls.background.widget.value = "clear"
    assert dash.setup.aperture.background == "clear"


# ------------------------------------------------------------ display and compute


def test_display_changes_recompute_nothing(dash, monkeypatch):
    calls = []
    real = engine.compute
    monkeypatch.setattr(engine, "compute", lambda *a, **k: calls.append(1) or real(*a, **k))
    runs, key = dash.computations, dash.result.key
    dash.scale = "log"
    dash.cmap = "viridis"
    dash.set_cut(1e-3, 5e-4)
    assert calls == [] and dash.computations == runs and dash.result.key == key
    # The map (a Bokeh figure updated in place) shows the same result on a log colour
    # scale: values floored six decades below the peak, as the cuts.
    fig = dash.map_pane.object
    image = fig.select_one({"type": GlyphRenderer, "visible": True}).glyph
    assert image.color_mapper.__class__.__name__ == "LogColorMapper"
    shown = np.asarray(dash._map_plot.source.data["image"][0], dtype=np.float64)
    peak = float(np.float32(dash.result.intensity.max()))
    expected = np.maximum(np.asarray(dash.result.intensity, np.float32), np.float32(peak * 1e-6))
    assert np.allclose(shown, expected, rtol=1e-6, atol=0)
    assert dash.aperture_pane.object.renderers[0].data_source.data["image"][0].size > 0
    # The cuts are Bokeh figures: on the log scale, with the chosen row and column.
    r = dash.result
    j, i = views.nearest(r.y, 5e-4), views.nearest(r.x, 1e-3)
    for axis, pane, values in (
        ("x", dash.cut_x_pane, r.intensity[j, :]),
        ("y", dash.cut_y_pane, r.intensity[:, i]),
    ):
        assert pane.object.y_scale.__class__.__name__ == "LogScale"
        data = pane.object.renderers[0].data_source.data
        assert np.allclose(data[axis], (r.x if axis == "x" else r.y) * 1e3)  # mm
        shown = np.asarray(data["irradiance"])
        floor = max(values.max(), 0) * 1e-6
        assert np.allclose(shown, np.maximum(values, floor), rtol=1e-12, atol=0)
    assert 'data-scale="log"' in dash.state_pane.object
    assert 'data-cmap="viridis"' in dash.state_pane.object


def test_cut_follows_the_chosen_point(dash):
    r = dash.result
    dash.set_cut(float(r.x[30]), float(r.y[10]))
    data = dash._cut_data("x")
    assert np.array_equal(data["values"], r.intensity[10, :])
    data = dash._cut_data("y")
    assert np.array_equal(data["values"], r.intensity[:, 30])
    assert 'data-cut-row="10"' in dash.state_pane.object
    assert 'data-cut-col="30"' in dash.state_pane.object


def test_failed_compute_keeps_the_last_result(dash, monkeypatch):
    good = dash.result

    def refuse(setup, **kw):
        raise SetupError("screen.samples", "too many samples for this test")

    monkeypatch.setattr(engine, "compute", refuse)
    assert dash.set_value("screen.distance", 3.0)  # the setup itself is valid
    assert dash.result is good
    assert "too many samples" in dash.last_error
    assert dash.messages[-1][0] == "error" and "last good result stays" in dash.messages[-1][1]
    assert not dash.busy


def test_internal_error_is_reported_in_plain_words(dash, monkeypatch):
    good = dash.result
    monkeypatch.setattr(engine, "compute", lambda s, **k: 1 / 0)
    dash.set_value("screen.distance", 3.0)
    assert dash.result is good
    assert "internal error" in dash.last_error and "ZeroDivisionError" in dash.last_error


def test_threaded_compute_applies_only_the_newest_request():
    d = Dashboard(_double_slit(), threaded=True)
    assert d.wait(120)
    for z in (2.1, 2.2, 2.3, 2.4):
        d.set_value("screen.distance", z)
    assert d.wait(120)
    assert d.result.key == snapshot.physics_hash(d.setup)
    assert d.setup.screen.distance == 2.4
    assert not d.busy


# ---------------------------------------------------------------- closed forms


def test_two_identical_slits_get_the_two_slit_closed_form():
    s = _double_slit()
    cf = views.closed_form(s, "fraunhofer")
    x = np.linspace(-0.01, 0.01, 7)
    # Two-slit far field = grating form with N = 2 (Born & Wolf, Principles of Optics,
    # 7th ed., §8.6.1).
    expect = analytic.grating_fraunhofer(x, 0 * x, 2, 2.5e-4, 5e-5, 1e-3, 6.33e-7, 2.0, 100.0)
    assert np.allclose(cf.fn(x, 0 * x), expect)
    assert "2 slits" in cf.label


@pytest.mark.parametrize(
    "change",
    [
        {"spectrum": "gaussian", "bandwidth": 5e-9},
        {"spectrum": "flat", "bandwidth": 5e-9},
        {"source_diameter": 1e-3},
    ],
    ids=["gaussian spectrum", "flat spectrum", "extended source"],
)
def test_no_monochromatic_closed_form_for_a_spectrum_or_a_source_size(change):
    s = _double_slit()
    assert views.closed_form(s, "fraunhofer").fn is not None
    for name, value in change.items():
        setattr(s.source, name, value)
    cf = views.closed_form(s, "fraunhofer")
    assert cf.fn is None and "broad-band or extended" in cf.label


def test_no_closed_form_for_an_irregular_aperture():
    s = _double_slit()
    s.aperture.elements = [*s.aperture.elements, Grating()]
    assert views.closed_form(s, "fraunhofer").fn is None
    assert views.closed_form(s, "fraunhofer").label == "no closed form for this aperture"


def test_closed_form_matches_the_far_field_result():
    # A single slit far beyond 2D²/λ: the computed cut follows the sinc² closed form
    # (Goodman, Introduction to Fourier Optics, 3rd ed., §4.4.1).
    s = Setup()
    s.aperture.elements = [Rect(width=5e-5, height=2e-4)]
    s.screen.distance = 5.0
    s.screen.width = 0.1
    s.screen.height = 0.1
    s.screen.samples = 201
    s.numerics.method = "fraunhofer"
    d = Dashboard(s, threaded=False)
    data = d._cut_data("x")
    assert data["reference"] is not None
    peak = data["values"].max()
    assert np.allclose(data["values"], data["reference"], atol=0.02 * peak)


# ------------------------------------------------------------- import and export


def test_export_then_import_reproduces_the_result(dash):
    dash.scale = "log"
    text = dash.export_snapshot()
    doc = json.loads(text)
    assert doc["format"] == "fringebench-snapshot" and doc["version"] == 1
    assert doc["view"]["scale"] == "log"
    key = dash.result.key
    dash.set_value("screen.distance", 3.0)
    dash.scale = "linear"
    assert dash.result.key != key
    assert dash.import_snapshot(text.encode())
    assert dash.result.key == key
    assert dash.scale == "log"


def test_bad_import_leaves_the_state_as_it_was(dash):
    before = snapshot.physics_hash(dash.setup)
    result = dash.result
    bad = json.loads(dash.export_snapshot())
    bad["screen"]["distance"] = -2
    bad["aperture"]["elements"][0]["width"] = "wide"
    assert not dash.import_snapshot(json.dumps(bad).encode(), name="bad.json")
    level, text = dash.messages[-1]
    assert level == "error"
    assert "screen.distance" in text and "aperture.elements[0].width" in text
    assert "bad.json" in text
    assert snapshot.physics_hash(dash.setup) == before and dash.result is result
    assert not dash.import_snapshot(b"{not json", name="broken.json")
    assert "malformed JSON" in dash.messages[-1][1]
    assert not dash.import_snapshot(b"x" * (snapshot.MAX_SNAPSHOT_BYTES + 1))
    assert "MB" in dash.messages[-1][1]
    assert snapshot.physics_hash(dash.setup) == before


def test_user_text_is_escaped_in_messages_shown_as_html(dash):
    doc = json.loads(dash.export_snapshot())
    doc["meta"]["title"] = "<script>alert(1)</script>"
    doc["source"]["kind"] = "<b>laser</b>"
    dash.import_snapshot(json.dumps(doc).encode(), name="<img src=x>.json")
    # The notification area receives html.escape()d text; the raw message is kept here.
    assert "<b>laser</b>" in dash.messages[-1][1]
    assert "<img" not in dash.validity_pane.object and "<script" not in dash.numbers_pane.object


# --------------------------------------------------------------------- links


def test_url_round_trip_keeps_setup_and_view(dash):
    dash.cmap = "magma"
    s = snapshot.from_dict(snapshot.to_dict(dash.setup))
    s.view = dash.view_state()
    value = urlstate.encode_setup(s)
    assert set(value) <= set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_")
    back = urlstate.decode_setup(value)
    assert snapshot.physics_hash(back) == snapshot.physics_hash(dash.setup)
    assert back.view["cmap"] == "magma"
    d2 = Dashboard(back, threaded=False)
    assert d2.cmap == "magma" and d2.result.key == dash.result.key


@pytest.mark.parametrize(
    ("value", "words"),
    [
        ("", "empty"),
        ("not*base64!", "damaged"),
        ("aGVsbG8", "not compressed"),
        ("A" * (urlstate.MAX_QUERY_CHARS + 1), "characters long"),
    ],
)
def test_damaged_links_raise_plain_errors(value, words):
    with pytest.raises(urlstate.UrlStateError, match=words):
        urlstate.decode_setup(value)


def test_link_with_an_invalid_setup_names_the_field(dash):
    doc = snapshot.to_dict(dash.setup)
    doc["screen"]["samples"] = 0
    import base64
    import zlib

    value = base64.urlsafe_b64encode(zlib.compress(json.dumps(doc).encode())).decode()
    with pytest.raises(urlstate.UrlStateError, match=r"screen\.samples"):
        urlstate.decode_setup(value.rstrip("="))


def test_cut_link_is_cut_short():
    value = urlstate.encode_setup(_double_slit())
    with pytest.raises(urlstate.UrlStateError):
        urlstate.decode_setup(value[: len(value) // 2])


# ------------------------------------------------------------------- presets


def test_presets_are_listed_by_title_with_the_default_first():
    presets = list_presets()
    assert presets, "presets/ holds the demo scenarios"
    first = next(iter(presets.values()))
    assert first.stem == "default"
    for title, path in presets.items():
        assert json.loads(path.read_text())["meta"].get("title", path.stem) in title


def test_preset_picker_loads_a_preset():
    presets = list_presets()
    d = Dashboard(load_preset(None), presets=presets, threaded=False)
    title, path = list(presets.items())[-1]
    d.preset_picker.value = title
    assert snapshot.physics_hash(d.setup) == snapshot.physics_hash(snapshot.load(path))


def test_unknown_preset_name_is_refused():
    from server.app import PresetError

    with pytest.raises(PresetError, match="no preset named"):
        load_preset("no-such-preset")


def test_dashboard_renders_outside_a_server_as_in_a_notebook(dash):
    # What a Jupyter cell does with the object: build the Bokeh models of its layout.
    from bokeh.document import Document

    root = dash.__panel__().get_root(Document())
    models = root.references()
    figures = [m for m in models if type(m).__name__ == "figure"]
    assert len(figures) >= 5  # the map, two cuts, aperture amplitude and phase
    texts = "".join(str(getattr(m, "text", "")) for m in models)
    assert "laser-safety standard" in texts


def test_a_value_beyond_the_slider_range_widens_it_with_room_to_spare():
    from server.controls import SetupControls

    shown = SetupControls(lambda path, value: None)
    s = Setup()
    slider = shown.control_for("screen.distance").widget
    end = slider.end
    s.screen.distance = end + 0.01  # metres: just past the slider's own range
    shown.refresh(s)
    assert slider.value == pytest.approx(end + 0.01) and slider.end > end + 1.0
    widened = slider.end
    s.screen.distance = end + 0.02  # a nearby value leaves the range as it is
    shown.refresh(s)
    assert slider.end == widened and slider.value == pytest.approx(end + 0.02)
