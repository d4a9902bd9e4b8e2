"""A real server and a real headless Chromium for the dashboard tests.

The server is ``fringebench serve`` on a free loopback port in a subprocess
(:mod:`localserver`, shared with the sharing tests and the bench scripts). When
Chromium cannot start the tests are skipped, unless
``FRINGEBENCH_REQUIRE_BROWSER=1`` asks for them to fail.
"""

from __future__ import annotations

import os
import time

import pytest
from localserver import CHROMIUM, CHROMIUM_ARGS, ROOT, free_port, start_server, stop_server

ARTIFACTS = ROOT / "tests" / "artifacts"
VIEWPORT = {"width": 1600, "height": 1000}

#: Reads the data the page holds: every Bokeh image source (shape, max, sum) and
#: every line source (its coordinate column name, length and the sum of its values).
READ_PLOTTED = """() => {
  const images = [], lines = [];
  for (const doc of Bokeh.documents) {
    for (const m of doc.all_models) {
      const d = m.data;
      if (!d || typeof d !== 'object' || Array.isArray(d)) continue;
      if ('image' in d && d.image.length) {
        const a = d.image[0];
        const shape = a.shape || [];
        let max = -Infinity, sum = 0;
        for (let k = 0; k < a.length; k++) { const v = a[k]; if (v > max) max = v; sum += v; }
        images.push({shape: shape.join('x'), max, sum});
      } else if ('irradiance' in d) {
        const v = d.irradiance; let sum = 0;
        for (let k = 0; k < v.length; k++) sum += v[k];
        lines.push({coord: ('x' in d) ? 'x' : 'y', n: v.length, sum});
      }
    }
  }
  return {images, lines};
}"""


def _require_browser() -> bool:
    return os.environ.get("FRINGEBENCH_REQUIRE_BROWSER") == "1"


@pytest.fixture(scope="session")
def server_url():
    port = free_port()
    proc = start_server(port)
    yield f"http://127.0.0.1:{port}/"
    log = stop_server(proc)
    assert "Traceback" not in log, log[-4000:]


@pytest.fixture(scope="session")
def browser():
    try:
        from playwright.sync_api import sync_playwright
    except ImportError as exc:  # pragma: no cover - the test extra installs it
        if _require_browser():
            pytest.fail(f"playwright is not installed: {exc}")
        pytest.skip(f"playwright is not installed: {exc}")
    pw = sync_playwright().start()
    try:
        b = pw.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
    except Exception as exc:
        pw.stop()
        if _require_browser():
            pytest.fail(f"Chromium could not start ({CHROMIUM}): {exc}")
        pytest.skip(f"Chromium could not start ({CHROMIUM}): {exc}")
    yield b
    b.close()
    pw.stop()


def new_page(context):
    """A page of ``context`` with a 60 s default timeout that keeps its console errors
    in ``page.console_errors``."""
    pg = context.new_page()
    pg.set_default_timeout(60_000)
    errors: list[str] = []
    pg.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    pg.on("pageerror", lambda e: errors.append(f"page error: {e}"))
    pg.console_errors = errors
    return pg


@pytest.fixture
def page(browser):
    context = browser.new_context(viewport=VIEWPORT, accept_downloads=True)
    yield new_page(context)
    context.close()


class Kit:
    """The page under test with the helpers the tests share."""

    def __init__(self, pg, url: str):
        self.page = pg
        self.url = url

    def state(self) -> dict[str, str]:
        return state(self.page)

    def wait_state(self, check, **kw) -> dict:
        return wait_state(self.page, check, **kw)

    def open(self, url: str | None = None) -> dict:
        return open_dashboard(self.page, url or self.url)

    def set_number(self, css: str, value: float) -> None:
        set_number(self.page, css, value)

    def plotted(self) -> dict:
        """What the browser holds in its plot data sources (see READ_PLOTTED)."""
        return self.page.evaluate(READ_PLOTTED)


@pytest.fixture
def kit(page, server_url) -> Kit:
    return Kit(page, server_url)


def state(pg) -> dict[str, str]:
    """The data-* attributes of the page's state element."""
    return pg.locator("#fb-state").evaluate(
        "e => Object.fromEntries(e.getAttributeNames().filter(n => n.startsWith('data-'))"
        ".map(n => [n.slice(5), e.getAttribute(n)]))"
    )


def wait_state(pg, check, *, timeout: float = 60.0, what: str = "the page state") -> dict:
    """Poll the page state until ``check(state)`` is true and no computation runs."""
    deadline = time.monotonic() + timeout
    last: dict = {}
    while time.monotonic() < deadline:
        try:
            last = state(pg)
        except Exception:  # the state element is not attached yet
            last = {}
        # The readings follow the map a tick later (data-numbers: their result's key).
        settled = last.get("numbers", last.get("key")) == last.get("key")
        if last and last.get("busy") == "0" and settled and check(last):
            return last
        pg.wait_for_timeout(100)
    raise AssertionError(f"timed out waiting for {what}; last state: {last}")


def open_dashboard(pg, url: str) -> dict:
    """Open the dashboard and wait for its first result on screen."""
    pg.goto(url)
    pg.locator("#fb-state").wait_for(state="attached")
    return wait_state(pg, lambda s: "key" in s, what="the first result")


def set_number(pg, css: str, value: float) -> None:
    """Type ``value`` into the number box of the control with class ``css``, then Enter."""
    box = pg.locator(f".{css} input").first
    box.fill(str(value))
    box.press("Enter")
