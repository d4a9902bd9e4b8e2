"""The dashboard in a real headless Chromium against a server the suite starts.

Numbers are read from what the page holds (its state element and Bokeh's data
sources in the browser), not from screenshots; one screenshot of the default
view is saved to tests/artifacts/ for review.
"""

from __future__ import annotations

import json
import math

import pytest
from conftest import ARTIFACTS, ROOT, VIEWPORT

from compute import snapshot
from server import urlstate

pytestmark = pytest.mark.browser

DEFAULT = ROOT / "presets" / "default.json"


def _screen_image(kit, st: dict) -> dict:
    """The browser's data source of the screen map (the image of the result's shape)."""
    images = [im for im in kit.plotted()["images"] if im["shape"] == st["shape"]]
    assert len(images) == 1, kit.plotted()["images"]
    return images[0]


def test_page_loads_and_every_view_renders(kit):
    pg = kit.page
    st = kit.open()
    assert st["key"] == snapshot.physics_hash(snapshot.load(DEFAULT))
    for css in ("fb-map", "fb-cut-x", "fb-cut-y", "fb-aperture", "fb-phase"):
        assert pg.locator(f".{css} canvas").count() > 0, css
    # The map the browser holds is the result the server computed.
    img = _screen_image(kit, st)
    assert img["max"] == pytest.approx(float(st["peak"]), rel=1e-6)
    assert img["sum"] == pytest.approx(float(st["sum"]), rel=1e-4)
    # The laser-safety caution is visible without scrolling.
    caution = pg.locator(".fb-safety")
    assert caution.is_visible()
    box = caution.bounding_box()
    assert box is not None and box["y"] + box["height"] <= VIEWPORT["height"]
    assert "safety officer" in caution.inner_text()
    # Validity card and numbers are on the page.
    assert pg.locator(".fb-validity .fb-badge").count() >= 3
    assert "W/m²" in pg.locator(".fb-numbers .fb-peak").inner_text()
    pg.wait_for_timeout(500)  # let the last frame paint before the picture
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    pg.screenshot(path=str(ARTIFACTS / "dashboard-default.png"))
    assert pg.console_errors == []


def test_distance_and_slit_width_change_the_plotted_data(kit):
    st0 = kit.open()
    kit.set_number("fb-distance", 2.4)
    st1 = kit.wait_state(lambda s: s.get("key") != st0["key"], what="a new result")
    # Twice the distance: the fringes spread out and the peak falls (Goodman,
    # Introduction to Fourier Optics, 3rd ed., §4.2: the Fresnel pattern scales with λz).
    assert float(st1["peak"]) < float(st0["peak"])
    img = _screen_image(kit, st1)
    assert img["max"] == pytest.approx(float(st1["peak"]), rel=1e-6)

    kit.set_number("fb-el-width", 40)  # µm, the first slit
    st2 = kit.wait_state(lambda s: s.get("key") != st1["key"], what="a result after the width")
    assert float(st2["peak"]) != pytest.approx(float(st1["peak"]), rel=1e-3)
    img = _screen_image(kit, st2)
    assert img["max"] == pytest.approx(float(st2["peak"]), rel=1e-6)
    assert kit.page.console_errors == []


def test_a_click_on_the_map_moves_the_cuts(kit):
    pg = kit.page
    st0 = kit.open()
    canvas = pg.locator(".fb-map canvas").first
    # The page may still be laying out (a cached first result arrives before the
    # readings and hints settle the column heights): click where the map stays.
    box, prev = canvas.bounding_box(), None
    for _ in range(50):
        if box == prev:
            break
        pg.wait_for_timeout(200)
        prev, box = box, canvas.bounding_box()
    points = {}
    for name, fx in (("left", 0.25), ("right", 0.7)):
        pg.wait_for_timeout(350)  # apart from the last click by more than a double tap
        pg.mouse.click(box["x"] + fx * box["width"], box["y"] + 0.35 * box["height"])
        points[name] = kit.wait_state(
            lambda s, prev=dict(points): (
                s["cut-x"] != st0["cut-x"] and all(s["cut-x"] != p["cut-x"] for p in prev.values())
            ),
            what=f"the cut to move ({name})",
        )
    left, right = points["left"], points["right"]
    assert float(left["cut-x"]) < 0 < float(right["cut-x"])
    assert float(left["cut-y"]) > 0  # the upper part of the map is +y
    assert left["key"] == st0["key"] == right["key"]  # a click computes nothing
    assert left["computations"] == st0["computations"]
    # The vertical cut the browser draws is the column through the clicked point.
    lines = kit.plotted()["lines"]
    col = float(right["cut-col-sum"])
    assert any(ln["coord"] == "y" and math.isclose(ln["sum"], col, rel_tol=1e-6) for ln in lines), (
        lines,
        col,
    )
    row = float(right["cut-row-sum"])
    assert any(ln["coord"] == "x" and math.isclose(ln["sum"], row, rel_tol=1e-6) for ln in lines), (
        lines,
        row,
    )


def test_export_then_import_restores_the_result_and_a_bad_upload_changes_nothing(kit, tmp_path):
    pg = kit.page
    st0 = kit.open()
    with pg.expect_download() as info:
        pg.locator(".fb-export a, .fb-export button").first.click()
    path = tmp_path / "exported.json"
    info.value.save_as(path)
    doc = json.loads(path.read_text())
    assert doc["format"] == "fringebench-snapshot" and doc["version"] == 1

    kit.set_number("fb-distance", 0.9)
    st1 = kit.wait_state(lambda s: s.get("key") != st0["key"], what="the changed setup")
    upload = pg.locator(".fb-import input[type=file]")
    upload.set_input_files(str(path))
    st2 = kit.wait_state(lambda s: s.get("key") == st0["key"], what="the imported setup")
    assert st2["peak"] == st0["peak"]

    bad = dict(doc)
    bad["screen"] = dict(doc["screen"], distance=-3)
    bad_path = tmp_path / "broken.json"
    bad_path.write_text(json.dumps(bad))
    upload.set_input_files(str(bad_path))
    message = pg.locator(".notyf__message", has_text="broken.json was not loaded")
    message.first.wait_for(state="visible", timeout=20_000)
    assert "screen.distance" in message.first.inner_text()
    pg.wait_for_timeout(500)
    st3 = kit.state()
    assert st3["key"] == st2["key"] and st3["setup-key"] == st2["setup-key"]
    assert st3["computations"] == st2["computations"]
    assert st1["key"] != st3["key"]
    assert pg.console_errors == []


def test_a_link_carrying_a_setup_opens_in_that_setup(kit):
    setup = snapshot.load(DEFAULT)
    setup.screen.distance = 2.0
    setup.source.wavelength = 6.33e-7
    setup.view = {"scale": "log", "cmap": "viridis"}
    st = kit.open(f"{kit.url}?s={urlstate.encode_setup(setup)}")
    assert st["key"] == snapshot.physics_hash(setup)
    assert st["scale"] == "log" and st["cmap"] == "viridis"
    # The address follows later changes, so a copied link opens the same view.
    kit.set_number("fb-distance", 1.5)
    kit.wait_state(lambda s: s.get("key") != st["key"], what="the changed setup")
    kit.page.wait_for_function("() => location.search.length > 3")
    value = kit.page.evaluate("() => new URLSearchParams(location.search).get('s')")
    assert urlstate.decode_setup(value).screen.distance == 1.5


def test_a_damaged_link_says_so_and_opens_the_default(kit):
    pg = kit.page
    st = kit.open(f"{kit.url}?s=not-a-setup")
    assert st["key"] == snapshot.physics_hash(snapshot.load(DEFAULT))
    pg.locator(".notyf__message", has_text="link").first.wait_for(state="visible")


def test_display_changes_compute_nothing(kit):
    pg = kit.page
    st0 = kit.open()
    pg.locator(".fb-scale button", has_text="log").click()
    st1 = kit.wait_state(lambda s: s["scale"] == "log", what="the log scale")
    pg.locator(".fb-cmap select").select_option("cividis")
    st2 = kit.wait_state(lambda s: s["cmap"] == "cividis", what="the colour map")
    assert st0["computations"] == st1["computations"] == st2["computations"]
    assert st0["key"] == st2["key"]
    assert pg.locator(".fb-map canvas").count() > 0
    assert pg.console_errors == []


def test_element_buttons_add_reorder_and_delete(kit):
    pg = kit.page
    st0 = kit.open()
    n = int(st0["elements"])
    pg.locator(".fb-new-shape select").select_option("circle")
    pg.locator(".fb-add-element button").click()
    st1 = kit.wait_state(lambda s: int(s["elements"]) == n + 1, what="the added element")
    assert st1["key"] != st0["key"]
    assert pg.locator(".fb-el-diameter input").first.is_visible()  # the editor shows it
    pg.locator(".fb-up-element button").click()
    st2 = kit.wait_state(lambda s: s["setup-key"] != st1["setup-key"], what="the reordering")
    pg.locator(".fb-delete-element button").click()
    st3 = kit.wait_state(lambda s: int(s["elements"]) == n, what="the deletion")
    # The circle, moved up and then deleted, leaves the aperture as it started.
    assert st3["setup-key"] == st0["setup-key"] != st2["setup-key"]
    assert pg.console_errors == []
