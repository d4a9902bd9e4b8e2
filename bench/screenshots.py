"""Screenshots of every preset and every tab at the two viewports people use.

For people to look at, not a test: nothing here passes or fails. Starts
``fringebench serve`` on a free loopback port, opens the dashboard in headless
Chromium at 1280×800 and at 1600×1000, loads every preset through the chooser
and saves the page as a person sees it (the first screen) and whole
(``-full``); then, at the default preset, opens each regime tab (Along the
beam, Sweep; a short sweep is run so that its plot is not empty) and saves the
tab in view.

    .venv/bin/python bench/screenshots.py OUT_FOLDER [--viewport 1280x800 ...]

Files: ``OUT_FOLDER/<width>x<height>/preset-<name>.png`` (and ``-full.png``),
``tab-<name>.png``.
"""

from __future__ import annotations

import argparse
import re
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))  # the shared server helpers
sys.path.insert(0, str(ROOT))

from localserver import CHROMIUM, CHROMIUM_ARGS, free_port, start_server, stop_server  # noqa: E402

from server.app import list_presets  # noqa: E402

VIEWPORTS = ("1280x800", "1600x1000")


def _slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")[:60]


def _state(pg) -> dict:
    return pg.locator("#fb-state").evaluate(
        "e => Object.fromEntries(e.getAttributeNames().filter(n => n.startsWith('data-'))"
        ".map(n => [n.slice(5), e.getAttribute(n)]))"
    )


def _settle(pg, check, timeout: float = 90.0) -> dict:
    """Wait until ``check(state)`` holds and nothing computes, then let the page paint."""
    deadline = time.monotonic() + timeout
    st: dict = {}
    while time.monotonic() < deadline:
        try:
            st = _state(pg)
        except Exception:
            st = {}
        if st and st.get("busy") == "0" and check(st):
            break
        pg.wait_for_timeout(150)
    pg.wait_for_timeout(700)
    return st


def _shoot(pg, path: Path, *, full: bool = False) -> None:
    pg.screenshot(path=str(path), full_page=full)
    print(path)


def _tab(pg, title: str) -> None:
    pg.locator(".fb-explore .bk-tab", has_text=title).first.click()


def run(out: Path, viewports: list[str]) -> None:
    from playwright.sync_api import sync_playwright

    presets = list_presets()
    port = free_port()
    proc = start_server(port, output=False)
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
            for vp in viewports:
                w, h = (int(v) for v in vp.split("x"))
                folder = out / vp
                folder.mkdir(parents=True, exist_ok=True)
                pg = browser.new_page(viewport={"width": w, "height": h})
                pg.goto(f"http://127.0.0.1:{port}/")
                pg.locator("#fb-state").wait_for(state="attached", timeout=90_000)
                _settle(pg, lambda s: "key" in s)
                for title, path in presets.items():
                    before = _state(pg).get("setup-key")
                    pg.locator(".fb-preset select").first.select_option(label=title)
                    same = path.stem == "default"  # the page opens on it
                    _settle(
                        pg,
                        lambda s, b=before, same=same: (
                            (same or s.get("setup-key") != b) and s.get("key") == s.get("setup-key")
                        ),
                    )
                    pg.evaluate("() => window.scrollTo(0, 0)")
                    pg.wait_for_timeout(300)
                    _shoot(pg, folder / f"preset-{path.stem}.png")
                    _shoot(pg, folder / f"preset-{path.stem}-full.png", full=True)
                # The regime tabs at the default preset.
                default = next(t for t, p_ in presets.items() if p_.stem == "default")
                pg.locator(".fb-preset select").first.select_option(label=default)
                _settle(pg, lambda s: "key" in s)
                _tab(pg, "Along the beam")
                _settle(pg, lambda s: s.get("alongz-status") == "ready")
                pg.locator(".fb-alongz").first.scroll_into_view_if_needed()
                pg.wait_for_timeout(500)
                _shoot(pg, folder / "tab-along-the-beam.png")
                _tab(pg, "Sweep")
                pg.wait_for_timeout(500)
                count = pg.locator(".fb-sweep-count1 input").first
                count.fill("6")
                count.press("Enter")
                pg.locator(".fb-sweep-run button").first.click()
                _settle(pg, lambda s: s.get("sweep-state") in ("done", "failed", "cancelled"))
                pg.wait_for_timeout(1500)  # the buttons follow the last point
                pg.locator(".fb-sweep").first.scroll_into_view_if_needed()
                pg.wait_for_timeout(500)
                _shoot(pg, folder / "tab-sweep.png")
                pg.close()
            browser.close()
    finally:
        stop_server(proc)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out", type=Path, help="folder for the PNG files")
    parser.add_argument(
        "--viewport",
        action="append",
        help="WIDTHxHEIGHT (repeatable; default 1280x800 and 1600x1000)",
    )
    args = parser.parse_args()
    viewports = args.viewport or list(VIEWPORTS)
    for vp in viewports:
        if not re.fullmatch(r"\d{3,4}x\d{3,4}", vp):
            parser.error(f"--viewport {vp!r} is not WIDTHxHEIGHT")
    run(args.out, viewports)
    return 0


if __name__ == "__main__":
    sys.exit(main())
