"""Benchmark: time from a control change to the updated map in the browser.

Starts ``fringebench serve`` on a free loopback port at the default preset,
opens the dashboard in headless Chromium, then changes the screen distance
``--runs`` times (a new value each time, so no result comes from the cache).
Each sample runs from the Enter key in the distance box to the first animation
frame at which the browser's data source for the map holds the new pattern.
Prints the median in ms. A benchmark, not a test: nothing here passes or fails.

    .venv/bin/python bench/browser_latency.py [--runs 20]
"""

from __future__ import annotations

import argparse
import statistics
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))  # the shared server helpers

from localserver import CHROMIUM, CHROMIUM_ARGS, free_port, start_server, stop_server  # noqa: E402

# The sum of the screen map's image data in the browser (the image of the result's shape).
MAP_SUM = """(shape) => {
  for (const doc of Bokeh.documents) for (const m of doc.all_models) {
    const d = m.data;
    if (!d || typeof d !== 'object' || !('image' in d) || !d.image.length) continue;
    const a = d.image[0];
    if ((a.shape || []).join('x') !== shape) continue;
    let s = 0; for (let k = 0; k < a.length; k++) s += a[k];
    return s;
  }
  return null;
}"""


def _attr(pg, name: str) -> str | None:
    return pg.locator("#fb-state").get_attribute(f"data-{name}")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=20, help="number of changes (default 20)")
    args = parser.parse_args()
    from playwright.sync_api import sync_playwright

    port = free_port()
    proc = start_server(port, output=False)
    samples, computes = [], []
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
            pg = browser.new_page(viewport={"width": 1600, "height": 1000})
            pg.goto(f"http://127.0.0.1:{port}/")
            pg.wait_for_selector("#fb-state[data-key]", state="attached", timeout=90_000)
            pg.wait_for_timeout(1000)
            shape = _attr(pg, "shape")
            box = pg.locator(".fb-distance input").first
            for k in range(args.runs):
                before = pg.evaluate(MAP_SUM, shape)
                box.fill(f"{1.0 + 0.013 * (k + 1):.3f}")
                pg.evaluate("() => { window.__fbT0 = performance.now(); }")
                box.press("Enter")
                handle = pg.wait_for_function(
                    f"""(args) => {{
                        const s = ({MAP_SUM})(args.shape);
                        return (s !== null && s !== args.before)
                            ? performance.now() - window.__fbT0 : false;
                    }}""",
                    arg={"shape": shape, "before": before},
                    polling="raf",
                    timeout=60_000,
                )
                samples.append(float(handle.json_value()))
                pg.wait_for_selector('#fb-state[data-busy="0"]', state="attached")
                computes.append(float(_attr(pg, "elapsed-ms") or "nan"))
            browser.close()
    finally:
        stop_server(proc)
    med = statistics.median(samples)
    print(f"runs: {len(samples)} at the default preset ({shape} px)")
    print(
        f"control change -> updated map in the browser: median {med:.0f} ms "
        f"(min {min(samples):.0f}, max {max(samples):.0f})"
    )
    print(f"of which computation on the server: median {statistics.median(computes):.0f} ms")
    print(f"median_ms={med:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
