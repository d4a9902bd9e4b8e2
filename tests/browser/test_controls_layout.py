"""What a person sees at 1280×800: refused values said in words, a page that fits.

One page load serves every check here (a module-scoped page), so the suite stays
fast: the loaded preset's note is on the page, the page does not scroll sideways,
no two controls overlap, and each kind of bad value typed into a number box gets a
visible message within 2 s while the box shows the last valid value again and the
result stays as it was.
"""

from __future__ import annotations

import json
import time

import pytest
from conftest import ROOT, new_page, open_dashboard, state, wait_state

pytestmark = pytest.mark.browser

SMALL = {"width": 1280, "height": 800}
DEFAULT = json.loads((ROOT / "presets" / "default.json").read_text(encoding="utf-8"))

#: Bounding boxes of every visible control (inputs, selects, buttons, text areas)
#: in the sidebar and the toolbar, through the open shadow roots of the page.
CONTROL_BOXES = """() => {
  const out = [];
  const walk = (root) => {
    for (const el of root.querySelectorAll('*')) {
      if (el.shadowRoot) walk(el.shadowRoot);
      const tag = el.tagName;
      if (!['INPUT', 'SELECT', 'BUTTON', 'TEXTAREA'].includes(tag)) continue;
      if (el.type === 'file' || el.type === 'hidden') continue;
      // A number box's step arrows are part of the box.
      if (String(el.className).includes('spin')) continue;
      const r = el.getBoundingClientRect();
      const s = getComputedStyle(el);
      if (r.width < 2 || r.height < 2) continue;
      if (s.visibility === 'hidden' || s.display === 'none') continue;
      out.push({tag, x: r.left + scrollX, y: r.top + scrollY, w: r.width, h: r.height,
                text: (el.value || el.innerText || el.type || '').slice(0, 30)});
    }
  };
  walk(document);
  return out;
}"""


@pytest.fixture(scope="module")
def small(browser, server_url):
    context = browser.new_context(viewport=SMALL)
    pg = new_page(context)
    open_dashboard(pg, server_url)
    pg.wait_for_timeout(800)  # the last layout pass
    yield pg
    context.close()


def _overlap(a: dict, b: dict) -> bool:
    """Whether two boxes overlap by more than 2 px both ways (buttons of a group touch)."""
    w = min(a["x"] + a["w"], b["x"] + b["w"]) - max(a["x"], b["x"])
    h = min(a["y"] + a["h"], b["y"] + b["h"]) - max(a["y"], b["y"])
    return w > 2.0 and h > 2.0


def _inside(a: dict, b: dict) -> bool:
    return (
        a["x"] >= b["x"] - 1
        and a["y"] >= b["y"] - 1
        and a["x"] + a["w"] <= b["x"] + b["w"] + 1
        and a["y"] + a["h"] <= b["y"] + b["h"] + 1
    )


def test_the_loaded_presets_name_and_note_are_on_the_page(small):
    picker = small.locator(".fb-preset select").first
    chosen = picker.evaluate("s => s.options[s.selectedIndex].text")
    assert chosen == DEFAULT["meta"]["title"]
    note = small.locator(".fb-preset-note .fb-preset-note-text").first
    assert note.is_visible()
    assert DEFAULT["meta"]["note"][:60] in note.inner_text()
    box = note.bounding_box()
    assert box is not None and box["y"] + box["height"] <= SMALL["height"]


def test_no_sideways_scroll_and_the_readings_and_share_button_fit(small):
    width = small.evaluate("() => document.scrollingElement.scrollWidth")
    inner = small.evaluate("() => innerWidth")
    assert width <= inner, (width, inner)
    for css in (".fb-numbers-pane", ".fb-share-bar button", ".fb-safety"):
        box = small.locator(css).first.bounding_box()
        assert box is not None, css
        assert box["x"] >= 0 and box["x"] + box["width"] <= inner + 0.5, (css, box)
    # The regime tabs are reachable under the map, within the first screen and a half.
    tab = small.locator(".fb-explore .bk-tab", has_text="Along the beam").first.bounding_box()
    assert tab is not None and tab["y"] < 1.5 * SMALL["height"], tab


def test_no_two_controls_overlap(small):
    boxes = small.evaluate(CONTROL_BOXES)
    assert len(boxes) > 20, boxes  # the sidebar's controls are there
    clashes = []
    for i, a in enumerate(boxes):
        for b in boxes[i + 1 :]:
            if _inside(a, b) or _inside(b, a):
                continue  # a part of a compound widget
            if _overlap(a, b):
                clashes.append((a, b))
    assert clashes == [], [(a["text"], b["text"], a, b) for a, b in clashes]


def _message(pg, words: str, since: float) -> float:
    """Seconds from ``since`` until a notification with ``words`` is visible."""
    pg.locator(".notyf__message", has_text=words).first.wait_for(state="visible", timeout=2000)
    return time.monotonic() - since


def _close_messages(pg) -> None:
    pg.evaluate(
        "() => { for (const el of document.querySelectorAll('.notyf__toast')) el.remove(); }"
    )


@pytest.mark.parametrize(
    ("css", "typed", "words"),
    [
        ("fb-distance", "0", "Distance must be more than 0 m"),
        ("fb-el-width", "-5", "Width must be more than 0 µm"),
        ("fb-source-wavelength", "0", "Wavelength must be more than 0 nm"),
        ("fb-screen-samples", "100000", "Pixels across must be at most 4096"),
        ("fb-el-transmission", "2", "Amplitude transmission must be at most 1"),
        ("fb-el-height", "", "Height needs a number"),
    ],
)
def test_a_refused_value_is_said_and_the_box_shows_the_last_valid_one(small, css, typed, words):
    pg = small
    _close_messages(pg)
    st0 = wait_state(pg, lambda s: "key" in s)
    box = pg.locator(f".{css} input").first
    before = box.input_value()
    box.fill(typed)
    t0 = time.monotonic()
    box.press("Enter")
    assert _message(pg, words, t0) < 2.0
    text = pg.locator(".notyf__message", has_text=words).first.inner_text()
    assert "stays at" in text and "." not in text.split(" ")[0]  # words, not a path
    pg.wait_for_function(
        "([el, v]) => el.value === v", arg=[box.element_handle(), before], timeout=2000
    )
    pg.wait_for_timeout(300)
    st1 = state(pg)
    assert st1["key"] == st0["key"] and st1["setup-key"] == st0["setup-key"]
    assert st1["computations"] == st0["computations"]
    assert st1["peak"] == st0["peak"]
    assert pg.console_errors == []
