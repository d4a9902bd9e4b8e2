"""The along-the-beam and sweep tabs in a real headless Chromium.

Numbers are read from the page's state element and from Bokeh's data sources in
the browser; the reference rows come from compute.sweep in this process.
"""

from __future__ import annotations

import math

import pytest
from conftest import ROOT

from compute import snapshot, sweep

pytestmark = pytest.mark.browser

DEFAULT = ROOT / "presets" / "default.json"

#: The sweep's plotted points: the source with the sweep's columns and the method.
READ_SWEEP = """(n) => {
  for (const doc of Bokeh.documents) {
    for (const m of doc.all_models) {
      const d = m.data;
      if (!d || typeof d !== 'object' || Array.isArray(d)) continue;
      if ('sweep_x' in d && 'sweep_y' in d && 'sweep_method' in d && d.sweep_x.length === n) {
        return {x: Array.from(d.sweep_x), y: Array.from(d.sweep_y),
                method: Array.from(d.sweep_method)};
      }
    }
  }
  return null;
}"""


def _plotted_sweep(pg, n: int) -> dict:
    """The sweep's points in the browser once a plot of ``n`` points has arrived."""
    handle = pg.wait_for_function(READ_SWEEP, arg=n, timeout=30_000)
    return handle.json_value()


#: The along-z image the browser holds: shape, max and the plot's horizontal range.
READ_ALONGZ = """() => {
  for (const doc of Bokeh.documents) {
    for (const m of doc.all_models) {
      const d = m.data;
      if (!d || typeof d !== 'object' || !('image' in d) || !d.image.length) continue;
      const a = d.image[0];
      if ((a.shape || []).join('x') !== EXPECTED) continue;
      let max = -Infinity;
      for (let k = 0; k < a.length; k++) if (a[k] > max) max = a[k];
      return {max};
    }
  }
  return null;
}"""


def _open_tab(kit, title: str) -> None:
    kit.page.locator(".fb-explore .bk-tab", has_text=title).first.click()


def _fill(pg, css: str, value) -> None:
    box = pg.locator(f".{css} input").first
    box.fill(str(value))
    box.press("Enter")


def test_the_along_z_image_shows_with_its_boundaries(kit):
    st = kit.open()
    _open_tab(kit, "Along the beam")
    st = kit.wait_state(lambda s: s.get("alongz-status") == "ready", what="the along-z image")
    pg = kit.page
    assert pg.locator(".fb-alongz-image canvas").count() > 0
    shape = st["alongz-shape"]
    image = pg.evaluate(READ_ALONGZ.replace("EXPECTED", repr(shape)))
    assert image is not None, "the browser holds no along-z image"
    assert image["max"] == pytest.approx(float(st["alongz-peak"]), rel=1e-6)
    # The boundaries: N_F = a²/(λz) = 10 and 0.1 (Goodman, Introduction to Fourier
    # Optics, 3rd ed., §4.5.1), a = 1.5 mm, the half-height of the preset's slits.
    setup = snapshot.load(DEFAULT)
    lam, a = setup.source.wavelength, 1.5e-3
    drawn = {
        float(nf): float(z) for nf, z in (b.split(":") for b in st["alongz-boundaries"].split(";"))
    }
    assert drawn == pytest.approx({10.0: a**2 / (lam * 10), 0.1: a**2 / (lam * 0.1)}, rel=1e-9)
    assert float(st["alongz-marker"]) == setup.screen.distance
    assert pg.console_errors == []


def test_a_click_on_the_image_moves_the_screen_and_recomputes_no_image(kit):
    pg = kit.page
    kit.open()
    _open_tab(kit, "Along the beam")
    st0 = kit.wait_state(lambda s: s.get("alongz-status") == "ready", what="the along-z image")
    canvas = pg.locator(".fb-alongz-image canvas").first
    canvas.scroll_into_view_if_needed()
    box = canvas.bounding_box()
    seen = []
    for fx in (0.35, 0.7):
        prev = seen[-1]["alongz-marker"] if seen else st0["alongz-marker"]
        pg.mouse.click(box["x"] + fx * box["width"], box["y"] + 0.5 * box["height"])
        seen.append(
            kit.wait_state(
                lambda s, prev=prev: s.get("alongz-marker") != prev and s.get("key"),
                what=f"the screen to move (click at {fx})",
            )
        )
    near, far = (float(s["alongz-marker"]) for s in seen)
    z_min, z_max = float(st0["alongz-z-min"]), float(st0["alongz-z-max"])
    assert z_min <= near < far <= z_max
    # The farther click is further along the log axis by about the share of the width.
    span = math.log10(z_max / z_min)
    assert 0.2 * span < math.log10(far / near) < 0.5 * span
    last = seen[-1]
    assert last["alongz-computations"] == st0["alongz-computations"]  # no new image
    assert last["alongz-key"] == st0["alongz-key"]
    assert last["setup-key"] != st0["setup-key"]  # the screen did move
    shown = float(pg.locator(".fb-distance input").first.input_value())
    assert shown == pytest.approx(far, rel=1e-9)  # the distance control, in m
    assert pg.console_errors == []


def _set_sweep(kit, path: str, start, stop, count, log: bool) -> None:
    pg = kit.page
    select = pg.locator(".fb-sweep-path1 select").first
    label = next(t for t in select.locator("option").all_inner_texts() if t.endswith(f"· {path}"))
    select.select_option(label=label)
    pg.wait_for_timeout(300)  # the suggested range arrives; then ours
    _fill(pg, "fb-sweep-start1", start)
    _fill(pg, "fb-sweep-stop1", stop)
    _fill(pg, "fb-sweep-count1", count)
    pg.locator(".fb-sweep-spacing1 button", has_text="log" if log else "linear").first.click()
    pg.wait_for_timeout(300)


def test_a_sweep_runs_and_its_points_are_compute_sweeps_rows(kit):
    pg = kit.page
    kit.open()
    _open_tab(kit, "Sweep")
    _set_sweep(kit, "screen.distance", 0.05, 5, 4, log=True)
    pg.locator(".fb-sweep-run button").first.click()
    st = kit.wait_state(lambda s: s.get("sweep-state") == "done", what="the sweep to finish")
    assert st["sweep-done"] == st["sweep-total"] == "4"
    plan = sweep.plan_sweep(snapshot.load(DEFAULT), ["screen.distance=0.05:5:4:log"])
    rows = sweep.run_plan(plan)
    plotted = _plotted_sweep(pg, 4)
    assert plotted["x"] == pytest.approx([r["screen.distance"] for r in rows], rel=1e-12)
    assert plotted["y"] == pytest.approx([r["peak_irradiance"] for r in rows], rel=1e-12)
    assert plotted["method"] == [r["method"] for r in rows]
    assert pg.console_errors == []


def test_cancel_stops_within_a_second_and_keeps_the_points(kit):
    pg = kit.page
    kit.open()
    _open_tab(kit, "Sweep")
    _set_sweep(kit, "screen.distance", 0.05, 5, 200, log=True)
    pg.locator(".fb-sweep-run button").first.click()
    kit.wait_state(
        lambda s: s.get("sweep-state") == "running" and int(s.get("sweep-done", 0)) >= 2,
        what="a running sweep",
    )
    pg.locator(".fb-sweep-cancel button").first.click()
    st = kit.wait_state(lambda s: s.get("sweep-state") == "cancelled", what="the stop")
    # The app's own measure from the Cancel press to the stop.
    assert float(st["sweep-cancel-ms"]) < 1000.0
    done = int(st["sweep-done"])
    assert 2 <= done < 200
    plotted = _plotted_sweep(pg, done)  # every point done, and no more
    assert len(plotted["x"]) == done
    assert pg.console_errors == []


def test_a_bad_range_gives_a_message_and_changes_nothing(kit):
    pg = kit.page
    st0 = kit.open()
    _open_tab(kit, "Sweep")
    _set_sweep(kit, "screen.distance", 5, 0.5, 4, log=False)
    pg.locator(".fb-sweep-run button").first.click()
    st = kit.wait_state(lambda s: "reversed" in s.get("sweep-message", ""), what="the message")
    assert st["sweep-runs"] == st0["sweep-runs"] and st["sweep-state"] == st0["sweep-state"]
    assert st["setup-key"] == st0["setup-key"]
    assert "reversed" in pg.locator(".fb-sweep-note .fb-regime-error").inner_text()
    assert pg.console_errors == []
