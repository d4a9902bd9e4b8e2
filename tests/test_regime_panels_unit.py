"""The along-the-beam and sweep tabs without a browser.

Dashboards here compute in the calling thread (``threaded=False``); where a
background thread is the point of a test the panel's own ``threaded`` is set.
The setups are invented demo data.
"""

from __future__ import annotations

import math
import threading
import time

import holoviews as hv
import numpy as np
import pytest

from compute import snapshot, sweep
from compute.model import Circle, Edge, Rect, Setup
from server import alongz_view, sweep_panel
from server.alongz_view import alongz_key, boundary_overlay, distance_ticks
from server.dashboard import Dashboard
from server.sweep_panel import METRICS, sweep_view, sweepable
from server.sweepcli import csv_text

hv.extension("bokeh")


def _pinhole() -> Setup:
    """Demo setup: a 0.5 mm circle in 633 nm light, screen 2 mm wide at 0.5 m (invented)."""
    s = Setup()
    s.source.wavelength = 6.33e-7
    s.aperture.elements = [Circle(diameter=5e-4)]
    s.screen.distance = 0.5
    s.screen.width = 2e-3
    s.screen.height = 2e-3
    s.screen.samples = 64
    return s


@pytest.fixture(autouse=True)
def _small_images(monkeypatch):
    monkeypatch.setattr(alongz_view, "COUNT", 48)
    alongz_view.CACHE.clear()
    yield
    alongz_view.CACHE.clear()


@pytest.fixture
def dash() -> Dashboard:
    d = Dashboard(_pinhole(), threaded=False)
    assert d.result is not None, d.messages
    return d


def _wait(check, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while not check():
        assert time.monotonic() < deadline, "timed out"
        time.sleep(0.02)


# --------------------------------------------------------------------------- along z


def test_the_cache_key_leaves_out_only_the_screen_distance():
    a, b = _pinhole(), _pinhole()
    b.screen.distance = 3.0
    assert alongz_key(a) == alongz_key(b)
    assert snapshot.physics_hash(a) != snapshot.physics_hash(b)
    b.source.wavelength = 5.32e-7
    assert alongz_key(a) != alongz_key(b)
    c = _pinhole()
    c.screen.width = 3e-3  # the cut's positions come from the window
    assert alongz_key(a) != alongz_key(c)


def test_the_tab_registers_and_computes_on_demand_only(dash):
    view = dash.alongz_view
    titles = [dash.explore_tabs._names[k] for k in range(len(dash.explore_tabs))]
    assert alongz_view.TAB_TITLE in titles and sweep_panel.TAB_TITLE in titles
    # Outside a server no screen result starts it; a request does.
    assert view.computations == 0 and view.data is None
    view.request(force=True)
    assert view.status == "ready" and view.computations == 1
    st = dash.state_extra
    assert st["alongz-shape"] == f"{dash.setup.screen.samples}x48"
    assert float(st["alongz-z-min"]) < 5e-4 < 1.0 < float(st["alongz-z-max"])


def test_moving_the_screen_moves_only_the_marker(dash):
    view = dash.alongz_view
    dash.explore_tabs.active = dash.explore_tabs.objects.index(view.panel)  # open: it follows
    view.request(force=True)
    key, n = view.data_key, view.computations
    assert dash.set_value("screen.distance", 2.5)
    view.request()
    assert view.computations == n and view.data_key == key and view.status == "ready"
    assert dash.state_extra["alongz-marker"] == repr(2.5)
    assert view._marker_pipe.data == 2.5
    # A change of the aperture needs a new image.
    assert dash.set_value("aperture.elements[0].diameter", 4e-4)
    assert view.status == "stale"
    view.request()
    assert view.computations == n + 1 and view.data_key != key


def test_a_hidden_tab_waits_and_computes_when_shown(dash):
    view = dash.alongz_view
    tabs = dash.explore_tabs
    sweep_index = next(k for k, o in enumerate(tabs.objects) if o is dash.sweep_panel.panel)
    tabs.active = sweep_index
    view.request()
    assert view.status == "stale" and view.computations == 0
    tabs.active = next(k for k, o in enumerate(tabs.objects) if o is view.panel)
    assert view.status == "ready" and view.computations == 1


def test_the_boundaries_sit_at_the_fresnel_numbers_they_claim(dash):
    view = dash.alongz_view
    view.request(force=True)
    az = view.data
    lam, a = dash.setup.source.wavelength, 2.5e-4  # a: the circle's radius
    # Fresnel number N_F = a²/(λz) (Goodman, Introduction to Fourier Optics, 3rd ed.,
    # §4.5.1); the limits 10 and 0.1 are common practice, no source.
    expected = {10.0: a**2 / (lam * 10.0), 0.1: a**2 / (lam * 0.1)}
    overlay = boundary_overlay(az)
    lines = [el for el in overlay if isinstance(el, hv.VLine)]
    labels = [el.text.strip() for el in overlay if isinstance(el, hv.Text)]
    drawn = sorted(10.0 ** float(el.data) for el in lines)
    assert drawn == pytest.approx(sorted(expected.values()), rel=1e-9)
    assert "N_F = 10" in labels and "N_F = 0.1" in labels
    # The image's own Fresnel numbers agree at the drawn lines.
    for nf, z in expected.items():
        k = int(np.argmin(np.abs(np.log(az.z / z))))
        assert az.fresnel_number[k] == pytest.approx(nf, rel=0.15)
    assert {"near field", "Fresnel zone", "Fraunhofer zone"} <= set(labels)


def test_distance_ticks_are_decades_in_bench_units():
    ticks = distance_ticks(1.5e-3, 338.0)
    assert [t[0] for t in ticks] == [-2.0, -1.0, 0.0, 1.0, 2.0]
    assert [t[1] for t in ticks] == ["10 mm", "100 mm", "1 m", "10 m", "100 m"]


def test_a_click_sets_the_distance_and_a_refused_one_changes_nothing(dash):
    view = dash.alongz_view
    view.request(force=True)
    view._tapped(x=math.log10(0.8), y=0.0)
    assert dash.setup.screen.distance == pytest.approx(0.8)
    before = snapshot.physics_hash(dash.setup)
    view._tapped(x=7.0, y=0.0)  # 10⁷ m: beyond what the screen allows
    assert snapshot.physics_hash(dash.setup) == before
    level, text = dash.messages[-1]
    assert level == "error" and text == "Distance must be at most 1000000 m; it stays at 0.8 m"


def test_a_failure_says_why_and_keeps_the_last_image(dash):
    view = dash.alongz_view
    view.request(force=True)
    good = view.data
    # A straight edge on an opaque background lets light through without bound.
    assert dash._edit(lambda s: setattr(s.aperture, "elements", [*s.aperture.elements, Edge()]))
    view.request(force=True)
    assert view.status == "failed"
    assert view.data is good
    assert "bounded aperture" in dash.state_extra["alongz-error"]
    assert any(level == "error" and "last image stays" in t for level, t in dash.messages)


def test_the_newest_request_wins(dash, monkeypatch):
    view = dash.alongz_view
    view.threaded = True
    gate = threading.Event()
    computed: list[str] = []
    real = alongz_view._compute

    def slow(setup, key):
        if not computed:
            gate.wait(30)
        computed.append(key)
        return real(setup, key)

    monkeypatch.setattr(alongz_view, "_compute", slow)
    keys = []
    for d in (5e-4, 4e-4, 3e-4):
        assert dash.set_value("aperture.elements[0].diameter", d)
        keys.append(alongz_key(dash.setup))
        view.request(force=True)
    gate.set()
    _wait(lambda: view.status == "ready" and not view._running)
    assert computed == [keys[0], keys[2]]  # the middle request was overtaken
    assert view.data_key == keys[2]


# ---------------------------------------------------------------------------- sweep


def _sweep_axis(panel, n, path, start, stop, count, log=False):
    ax = panel.axis1 if n == 1 else panel.axis2
    ax.path.value = path
    ax.start.value, ax.stop.value, ax.count.value = start, stop, count
    ax.spacing.value = "log" if log else "linear"


def test_the_settings_offered_are_the_numeric_paths_in_bench_units(dash):
    items = {s.path: s for s in sweepable(dash.setup)}
    assert items["source.wavelength"].unit == "nm"
    assert items["screen.distance"].unit == "m"
    assert items["aperture.elements[0].diameter"].unit == "µm"
    assert items["screen.samples"].integer
    for s in items.values():  # every float one is a path the sweep accepts as it stands
        if s.integer:
            continue
        v = float(s.value)
        lo, hi = (v * 0.999, v) if v > 0 else ((v, v * 0.999) if v < 0 else (v, 1e-9))
        plan = sweep.plan_sweep(dash.setup, [sweep.Vary(s.path, lo, hi, 2)])
        assert plan.axes[0][0] == s.path


def test_a_sweep_plots_the_rows_of_compute_sweep(dash):
    panel = dash.sweep_panel
    _sweep_axis(panel, 1, "screen.distance", 0.05, 5.0, 4, log=True)
    assert panel.run()
    assert panel.state == "done" and panel.done == 4
    plan = sweep.plan_sweep(dash.setup, ["screen.distance=0.05:5:4:log"])
    expected = sweep.run_plan(plan)
    assert panel.rows == expected
    plot = sweep_view(panel.axes, panel.rows, "peak_irradiance")
    scatter = next(el for el in plot if isinstance(el, hv.Scatter))
    assert list(scatter.dimension_values("sweep_x")) == [r["screen.distance"] for r in expected]
    assert list(scatter.dimension_values("sweep_y")) == [r["peak_irradiance"] for r in expected]
    assert list(scatter.dimension_values("sweep_method")) == [r["method"] for r in expected]
    assert panel._csv().getvalue() == csv_text(expected, plan.columns)
    assert dash.state_extra["sweep-done"] == "4"


def _mesh(view):
    """The map of a two-setting sweep (under its validity marks)."""
    return next(el for el in view if isinstance(el, hv.QuadMesh))


def test_bench_units_become_si_and_two_settings_make_a_map(dash):
    panel = dash.sweep_panel
    _sweep_axis(panel, 1, "aperture.elements[0].diameter", 300.0, 500.0, 3)  # µm
    _sweep_axis(panel, 2, "source.wavelength", 500.0, 600.0, 2)  # nm
    assert panel.run()
    plan = sweep.plan_sweep(
        dash.setup,
        ["aperture.elements[0].diameter=3e-4:5e-4:3", "source.wavelength=5e-7:6e-7:2"],
    )
    assert panel.rows == sweep.run_plan(plan)
    mesh = _mesh(sweep_view(panel.axes, panel.rows, "central_lobe_x"))
    grid = mesh.dimension_values(2, flat=False)
    assert grid.shape == (2, 3)
    # Grid order: the first setting outermost; the map shows it across.
    assert grid[1, 2] == pytest.approx(
        panel.rows[5]["central_lobe_x"] / METRICS["central_lobe_x"].factor
    )
    assert _mesh(sweep_view(panel.axes, panel.rows, "method")) is not None


@pytest.mark.parametrize(
    ("start", "stop", "count", "words"),
    [
        (5.0, 0.5, 5, "reversed"),
        (1.0, 1.0, 5, "empty"),
        (0.5, 5.0, 1, "COUNT"),
        (-1.0, 5.0, 5, "log range needs START > 0"),
    ],
)
def test_a_bad_range_says_why_and_changes_nothing(dash, start, stop, count, words):
    panel = dash.sweep_panel
    _sweep_axis(panel, 1, "screen.distance", 0.1, 1.0, 2)
    assert panel.run()
    rows, runs = list(panel.rows), panel.runs
    before = snapshot.physics_hash(dash.setup)
    _sweep_axis(panel, 1, "screen.distance", start, stop, count, log=words.startswith("log"))
    assert not panel.run()
    assert words in panel.message and "screen.distance" in panel.message
    assert panel.rows == rows and panel.runs == runs and panel.state == "done"
    assert snapshot.physics_hash(dash.setup) == before
    assert dash.messages[-1][0] == "error"


def test_too_many_points_are_refused(dash):
    panel = dash.sweep_panel
    _sweep_axis(panel, 1, "screen.distance", 0.1, 1.0, 101)
    _sweep_axis(panel, 2, "source.wavelength", 500.0, 600.0, 100)
    assert not panel.run()
    assert f"at most {sweep.MAX_POINTS}" in panel.message


def test_a_follower_cannot_start_a_sweep(dash):
    panel = dash.sweep_panel
    dash.following = object()  # what follow mode sets
    _sweep_axis(panel, 1, "screen.distance", 0.1, 1.0, 2)
    assert not panel.run()
    assert "follows a shared" in panel.message and panel.runs == 0


def test_cancel_keeps_the_points_done_and_allows_one_sweep_at_a_time(dash):
    panel = dash.sweep_panel
    panel.threaded = True
    _sweep_axis(panel, 1, "screen.distance", 0.05, 5.0, 200, log=True)
    assert panel.run()
    assert not panel.run()  # one sweep per session
    assert "already running" in panel.message
    _wait(lambda: panel.done >= 2)
    panel.cancel()
    assert panel.wait(30)
    _wait(lambda: panel.state == "cancelled")
    assert 2 <= panel.done < 200
    plan = sweep.plan_sweep(dash.setup, ["screen.distance=0.05:5:200:log"])
    kept = [(k, r) for k, r in enumerate(panel.rows) if r is not None]
    assert len(kept) == panel.done
    # The kept points are the first ones, as compute.sweep computes them.
    assert [k for k, _ in kept] == list(range(panel.done))
    for k, r in kept[:2]:
        expected = dict(plan.point_values(k))
        expected.update(sweep.compute_point(plan.docs[k]))
        assert r == expected
    assert panel.cancel_ms is not None
    assert "cancelled after" in dash.state_extra["sweep-message"]
    # Nothing more arrives after the stop.
    done = panel.done
    time.sleep(0.5)
    assert panel.done == done


def test_a_setup_change_refreshes_the_settings(dash):
    panel = dash.sweep_panel
    assert dash._edit(
        lambda s: setattr(s.aperture, "elements", [*s.aperture.elements, Rect(width=1e-4)])
    )
    assert "aperture.elements[1].width" in panel._choices
    assert "aperture.elements[1].width" in panel.axis1.path.options.values()
