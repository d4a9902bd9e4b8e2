"""The verdict over the map in a real headless Chromium: shown when the result's
report says invalid, gone when it holds (common practice, no source)."""

from __future__ import annotations

import pytest
from benchsetup import bench

from compute import model, snapshot
from server import urlstate

pytestmark = pytest.mark.browser


def test_invalid_verdict_shows_a_banner_above_the_map(kit):
    pg = kit.page
    # Forced Fraunhofer 5 cm behind a 1 mm disc: its report says invalid (Goodman,
    # Introduction to Fourier Optics, 3rd ed., §4.3: the dropped quadratic phase is ~50 rad).
    setup = bench(model.Circle(diameter=1e-3), distance=0.05, width=2e-3, samples=128)
    setup.numerics.method = "fraunhofer"
    st = kit.open(f"{kit.url}?s={urlstate.encode_setup(setup)}")
    assert st["key"] == snapshot.physics_hash(setup)
    assert st["verdict"] == "invalid"
    banner = pg.locator(".fb-verdict-banner")
    banner.wait_for(state="visible")
    assert "Quadratic phase dropped by Fraunhofer" in banner.inner_text()
    b, m = banner.bounding_box(), pg.locator(".fb-map").first.bounding_box()
    assert b is not None and m is not None and b["y"] + b["height"] <= m["y"] + 1
    # Back to auto: the report holds and the banner goes.
    setup.numerics.method = "auto"
    st = kit.open(f"{kit.url}?s={urlstate.encode_setup(setup)}")
    assert st["verdict"] != "invalid"
    assert pg.locator(".fb-verdict-banner").count() == 0 or not banner.is_visible()
    assert pg.console_errors == []
