"""Benchmark: time from a control change to the updated picture in the browser.

Starts ``fringebench serve`` on a free loopback port, opens the dashboard in
headless Chromium and times, case by case, the Enter key in a number box to the
first animation frame at which the browser's plot data hold the new picture (any
image data source changed: the map, or the camera frame). Every change is a new
value, so no result comes from the cache. Beside each median it prints the
server's own compute time of the same runs (the page's ``data-elapsed-ms``) and the
load average of the machine before and after the case. A benchmark, not a test:
nothing here passes or fails.

Cases (``--cases``, comma-separated; all by default):

``default``
    the screen distance at the default preset;
``window1024``
    the same change on a 20 mm × 20 mm window of 1024 × 1024 pixels;
``camera-readout``
    the exposure of a 2448 × 2048 camera on the default preset (nothing propagates);
``camera-geometry``
    the pixel pitch of that camera (the light is propagated onto the new pixels);
``first-map``
    opening the page (a new page each run) to the first map drawn, default preset.

    .venv/bin/python bench/browser_latency.py [--runs 20] [--cases default,first-map]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))  # the shared server helpers
sys.path.insert(0, str(ROOT))

from localserver import CHROMIUM, CHROMIUM_ARGS, free_port, start_server, stop_server  # noqa: E402

from compute import snapshot  # noqa: E402
from compute.model import Camera  # noqa: E402
from server import urlstate  # noqa: E402

CASES = ("default", "window1024", "camera-readout", "camera-geometry", "first-map")

# A signature of every image the page holds: shape and sum of each image data source.
IMAGES = """() => {
  const out = [];
  for (const doc of Bokeh.documents) for (const m of doc.all_models) {
    const d = m.data;
    if (!d || typeof d !== 'object' || !('image' in d) || !d.image.length) continue;
    const a = d.image[0];
    let s = 0; for (let k = 0; k < a.length; k += 7) s += a[k];
    out.push((a.shape || []).join('x') + ':' + s);
  }
  return out.join(';');
}"""
# True once the map figure holds an image (first map on screen).
MAP_SHOWN = """() => {
  if (!window.Bokeh) return false;
  for (const doc of Bokeh.documents) {
    const f = doc.get_model_by_name('fb-map-figure');
    if (!f) continue;
    for (const r of f.renderers) {
      const d = r.data_source && r.data_source.data;
      if (d && d.image && d.image.length) return performance.now();
    }
  }
  return false;
}"""


def _attr(pg, name: str) -> str | None:
    return pg.locator("#fb-state").get_attribute(f"data-{name}")


def _load() -> str:
    return f"{os.getloadavg()[0]:.2f}"


def _open(pg, url: str) -> None:
    pg.goto(url)
    pg.wait_for_selector("#fb-state[data-key]", state="attached", timeout=180_000)
    pg.wait_for_selector('#fb-state[data-busy="0"]', state="attached", timeout=180_000)
    pg.wait_for_timeout(1000)


def _time_changes(pg, css: str, values: list[str]) -> tuple[list[float], list[float]]:
    """Type each value into the box ``css`` and time it to the changed picture."""
    box = pg.locator(f".{css} input").first
    samples, computes = [], []
    for v in values:
        before = pg.evaluate(IMAGES)
        box.fill(v)
        pg.evaluate("() => { window.__fbT0 = performance.now(); }")
        box.press("Enter")
        handle = pg.wait_for_function(
            f"""(before) => {{
                const s = ({IMAGES})();
                return s !== before ? performance.now() - window.__fbT0 : false;
            }}""",
            arg=before,
            polling="raf",
            timeout=180_000,
        )
        samples.append(float(handle.json_value()))
        pg.wait_for_selector('#fb-state[data-busy="0"]', state="attached", timeout=180_000)
        computes.append(float(_attr(pg, "elapsed-ms") or "nan"))
    return samples, computes


def _setup_url(base: str, case: str) -> str:
    setup = snapshot.load(ROOT / "presets" / "default.json")
    if case == "window1024":
        setup.screen.width = setup.screen.height = 0.02
        setup.screen.samples = 1024
    elif case.startswith("camera"):
        setup.camera = Camera(pixels_x=2448, pixels_y=2048, pixel_pitch=3.45e-6)
    return f"{base}?s={urlstate.encode_setup(setup)}"


def _report(case: str, what: str, samples: list[float], computes: list[float], loads) -> dict:
    med = statistics.median(samples)
    comp = statistics.median(computes) if computes else float("nan")
    print(
        f"{case:16s} {what}: median {med:.0f} ms (min {min(samples):.0f}, max {max(samples):.0f}, "
        f"n={len(samples)}); server compute median {comp:.0f} ms; load {loads[0]} -> {loads[1]}"
    )
    return {"case": case, "median_ms": med, "compute_ms": comp, "load": loads}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=20, help="changes per case (default 20)")
    parser.add_argument("--cases", default=",".join(CASES), help="comma-separated cases")
    args = parser.parse_args()
    cases = [c for c in args.cases.split(",") if c]
    unknown = [c for c in cases if c not in CASES]
    if unknown:
        parser.error(f"unknown case(s) {', '.join(unknown)}; choose from {', '.join(CASES)}")
    from playwright.sync_api import sync_playwright

    port = free_port()
    proc = start_server(port, output=False)
    base = f"http://127.0.0.1:{port}/"
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
            for case in cases:
                load0 = _load()
                pg = browser.new_page(viewport={"width": 1600, "height": 1000})
                if case == "first-map":
                    samples = []
                    for _ in range(max(3, args.runs // 4)):
                        t0 = time.monotonic()
                        pg.goto(base)
                        pg.wait_for_function(MAP_SHOWN, polling="raf", timeout=180_000)
                        samples.append((time.monotonic() - t0) * 1e3)
                        pg.wait_for_selector('#fb-state[data-busy="0"]', state="attached")
                        pg.goto("about:blank")
                    _report(case, "open -> first map drawn", samples, [], (load0, _load()))
                    pg.close()
                    continue
                _open(pg, _setup_url(base, case) if case != "default" else base)
                if case in ("default", "window1024"):
                    values = [f"{1.0 + 0.013 * (k + 1):.3f}" for k in range(args.runs)]
                    samples, computes = _time_changes(pg, "fb-distance", values)
                    what = f"distance -> map ({_attr(pg, 'shape')} px)"
                else:
                    pg.locator(".fb-camera-card .card-header").first.click()
                    if case == "camera-readout":
                        values = [f"{0.05 + 0.001 * (k + 1):.3f}" for k in range(args.runs)]
                        samples, computes = _time_changes(pg, "fb-camera-exposure", values)
                        what = "exposure -> camera frame (2448x2048)"
                    else:
                        runs = max(3, args.runs // 4)
                        values = [f"{3.45 + 0.01 * (k + 1):.2f}" for k in range(runs)]
                        samples, computes = _time_changes(pg, "fb-camera-pixel-pitch", values)
                        what = "pixel pitch -> camera frame (2448x2048)"
                _report(case, what, samples, computes, (load0, _load()))
                pg.close()
            browser.close()
    finally:
        stop_server(proc)
    return 0


if __name__ == "__main__":
    sys.exit(main())
