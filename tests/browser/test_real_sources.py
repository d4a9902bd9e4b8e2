"""Real sources and cameras in headless Chromium: bandwidth, the camera panel, true colour.

Numbers are read from what the page holds (its state element and Bokeh's data
sources in the browser) and compared with the engine run here on the same setup.
Setups are our own demo settings (invented data).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from conftest import ROOT
from references import reference_coherence

from compute import engine, incoherent, snapshot
from compute.model import Aperture, Camera, Numerics, Rect, Screen, Setup, Source
from server import camera_panel, urlstate

pytestmark = pytest.mark.browser

DEFAULT = ROOT / "presets" / "default.json"

#: The cut along x that the page plots: coordinates (mm) and irradiance of every line.
READ_X_LINES = """() => {
  const out = [];
  for (const doc of Bokeh.documents) for (const m of doc.all_models) {
    const d = m.data;
    if (d && typeof d === 'object' && !Array.isArray(d) && 'irradiance' in d && 'x' in d)
      out.push({x: Array.from(d.x), v: Array.from(d.irradiance)});
  }
  return out;
}"""

#: Every image the page holds: float images (shape, sum of finite values, count of
#: NaN and of ones) and RGBA images (the sums of their red, green and blue bytes).
READ_IMAGES = """() => {
  const floats = [], rgba = [], hist = [];
  for (const doc of Bokeh.documents) for (const m of doc.all_models) {
    const d = m.data;
    if (!d || typeof d !== 'object' || Array.isArray(d)) continue;
    if ('pixels' in d) { let s = 0; for (const v of d.pixels) s += v; hist.push(s); }
    if (!('image' in d) || !d.image.length) continue;
    const a = d.image[0], shape = (a.shape || []).join('x');
    if (a instanceof Uint32Array) {
      const b = new Uint8Array(a.buffer, a.byteOffset, a.byteLength);
      let r = 0, g = 0, bl = 0;
      for (let k = 0; k < b.length; k += 4) { r += b[k]; g += b[k + 1]; bl += b[k + 2]; }
      rgba.push({shape, r, g, b: bl});
    } else {
      let sum = 0, nan = 0, ones = 0;
      for (let k = 0; k < a.length; k++) {
        const v = a[k];
        if (Number.isNaN(v)) nan++; else { sum += v; if (v === 1) ones++; }
      }
      floats.push({shape, sum, nan, ones});
    }
  }
  return {floats, rgba, hist};
}"""


def _open(kit, setup: Setup) -> dict:
    return kit.open(f"{kit.url}?s={urlstate.encode_setup(setup)}")


def _open_camera_card(kit) -> None:
    kit.page.locator(".fb-camera-card .card-header").first.click()
    kit.page.locator(".fb-camera-toggle input").first.wait_for(state="visible")


def _small_camera_setup() -> Setup:
    """The default double slit with a 320 × 240 sensor of 5 µm pixels at the centre."""
    setup = snapshot.load(DEFAULT)
    setup.camera = Camera(pixels_x=320, pixels_y=240, pixel_pitch=5e-6)
    return setup


# ------------------------------------------------------------------ bandwidth

LAM, SEP, SLIT, Z = 600e-9, 0.5e-3, 5e-6, 2.0


def _narrow_double_slit() -> Setup:
    """Two 5 µm slits 0.5 mm apart: their envelope is flat over the fringes we read."""
    pitch = 0.1 / 1000
    return Setup(
        source=Source(kind="plane", wavelength=LAM, irradiance=1.0),
        aperture=Aperture(
            elements=[
                Rect(x=-SEP / 2, width=SLIT, height=50e-6),
                Rect(x=SEP / 2, width=SLIT, height=50e-6),
            ]
        ),
        screen=Screen(distance=Z, width=0.1, height=3 * pitch, x=0.05, samples=1000),
        numerics=Numerics(precision="double"),
    )


def _path_difference(x: np.ndarray) -> np.ndarray:
    """Exact path difference from the two slit centres to (x, 0, Z)."""
    return np.hypot(Z, x + SEP / 2) - np.hypot(Z, x - SEP / 2)


def _visibility(x: np.ndarray, row: np.ndarray, x0: float, wavenumber: float) -> float:
    """Michelson visibility of the local fringes by a least-squares fit over two fringes.

    I ≈ a + a′(x − x0) + b cos φ + c sin φ, φ = 2πσΔ(x), V = √(b² + c²)/a (Born & Wolf,
    Principles of Optics, 7th ed., ch. 7, the visibility of fringes; the fit: common
    practice, no source).
    """
    near = np.abs(x - x0) <= LAM * Z / SEP
    phase = 2 * np.pi * wavenumber * _path_difference(x[near])
    design = np.column_stack([np.ones(near.sum()), x[near] - x0, np.cos(phase), np.sin(phase)])
    coef, *_ = np.linalg.lstsq(design, row[near], rcond=None)
    return float(math.hypot(coef[2], coef[3]) / coef[0])


def _plotted_row(kit, st: dict) -> tuple[np.ndarray, np.ndarray]:
    """The computed cut along x that the browser draws (the one the state's sum names)."""
    lines = kit.page.evaluate(READ_X_LINES)
    want = float(st["cut-row-sum"])
    best = min(lines, key=lambda ln: abs(sum(ln["v"]) - want))
    assert sum(best["v"]) == pytest.approx(want, rel=1e-9)
    return np.asarray(best["x"]) * 1e-3, np.asarray(best["v"])


def test_a_bandwidth_set_on_the_page_lowers_the_visibility_as_the_coherence_says(kit):
    pg = kit.page
    setup = _narrow_double_slit()
    st0 = _open(kit, setup)
    x, mono = _plotted_row(kit, st0)
    x_far = 21.9e-6 * Z / SEP
    assert _visibility(x, mono, x_far, 1 / LAM) > 0.97  # monochromatic: full contrast

    pg.locator(".fb-source-spectrum select").select_option(label="Gaussian")
    kit.wait_state(lambda s: s.get("key") != st0["key"], what="the Gaussian spectrum")
    kit.set_number("fb-source-bandwidth", 12)  # nm, FWHM
    setup.source.spectrum, setup.source.bandwidth = "gaussian", 12e-9
    st1 = kit.wait_state(
        lambda s: s.get("key") == snapshot.physics_hash(setup), what="the 12 nm spectrum"
    )
    x, row = _plotted_row(kit, st1)
    route = incoherent.route(setup)
    wavenumber = float(np.sum(route.weights / route.wavelengths))
    for delta in (5.2e-6, 13.2e-6, 21.9e-6):  # |γ| ≈ 0.9, 0.5, 0.15
        x0 = delta * Z / SEP
        path = float(_path_difference(np.array(x0)))
        expected = reference_coherence("gaussian", 12e-9, path, LAM)
        # Visibility = |γ(Δ)|, the modulus of the complex degree of coherence of the
        # spectrum at the path difference Δ of the position (Born & Wolf, Principles of
        # Optics, 7th ed., ch. 10; Goodman, Statistical Optics, ch. 5, Gaussian line).
        assert _visibility(x, row, x0, wavenumber) == pytest.approx(expected, abs=0.02)
    assert pg.console_errors == []


# --------------------------------------------------------------------- camera


def test_a_camera_added_on_the_page_shows_the_engine_frame_and_its_histogram(kit):
    pg = kit.page
    st0 = kit.open()
    assert st0["camera-on"] == "0"
    assert not pg.locator(".fb-camera-frame").first.is_visible()
    _open_camera_card(kit)
    pg.locator(".fb-camera-toggle input").first.check()
    st = kit.wait_state(lambda s: s.get("camera-on") == "1", what="the camera frame")
    setup = snapshot.load(DEFAULT)
    setup.camera = Camera()  # the editor's default sensor, centred on the window
    assert st["setup-key"] == snapshot.physics_hash(setup)
    extras = engine.compute(setup).extras
    counts = extras["counts"]
    assert int(st["camera-sum"]) == int(counts.sum(dtype=np.int64))
    assert int(st["camera-peak"]) == int(counts.max())
    assert st["camera-shape"] == "1024x1280" and st["camera-factor"] == "2"
    # The frame the browser holds: the engine's counts in 2 × 2 block means.
    _, _, dn, _, _ = camera_panel.display_frame(
        extras["camera_x"], extras["camera_y"], counts, extras["saturated"], 800
    )
    images = pg.evaluate(READ_IMAGES)
    frames = [im for im in images["floats"] if im["shape"] == "512x640"]
    assert len(frames) == 2, images["floats"]  # the frame and its (empty) saturation marks
    frames = [im for im in frames if im["nan"] == 0]
    assert len(frames) == 1, images["floats"]
    assert frames[0]["sum"] == pytest.approx(float(dn.sum(dtype=np.float64)), rel=1e-5)
    assert 1280 * 1024 in images["hist"]  # the histogram counts every pixel once
    for css in ("fb-camera-frame", "fb-camera-histogram"):
        assert pg.locator(f".{css} canvas").count() > 0, css
    assert "DN" in pg.locator(".fb-camera-peak").first.inner_text()
    assert pg.console_errors == []


def test_a_saturating_exposure_marks_the_saturated_pixels(kit):
    pg = kit.page
    setup = _small_camera_setup()
    st0 = _open(kit, setup)
    assert st0["camera-on"] == "1" and st0["camera-saturated"] == "0"
    _open_camera_card(kit)
    kit.set_number("fb-camera-exposure", 1.0)  # ms: 20× the default
    setup.camera.exposure = 1e-3
    st = kit.wait_state(
        lambda s: s.get("key") == snapshot.physics_hash(setup), what="the long exposure"
    )
    n_sat = int(engine.compute(setup).extras["saturated"].sum())
    assert n_sat > 0 and int(st["camera-saturated"]) == n_sat
    frame = [im for im in pg.evaluate(READ_IMAGES)["floats"] if im["shape"] == "240x320"]
    masks = [im for im in frame if im["nan"] > 0]
    assert len(frame) == 2 and len(masks) == 1, frame  # the frame and its marks
    assert masks[0]["ones"] == n_sat and masks[0]["nan"] == 240 * 320 - n_sat
    assert f"{n_sat} px" in pg.locator(".fb-camera-saturated").first.inner_text()
    assert pg.console_errors == []


def test_a_bad_camera_value_is_a_clear_message_and_changes_nothing(kit):
    pg = kit.page
    st0 = _open(kit, _small_camera_setup())
    _open_camera_card(kit)
    kit.set_number("fb-camera-exposure", 0)
    # The control's own label and unit, not the snapshot path (camera.exposure).
    message = pg.locator(".notyf__message", has_text="Exposure must be more than 0 ms")
    message.first.wait_for(state="visible", timeout=20_000)
    assert "it stays at 0.05 ms" in message.first.inner_text()
    pg.wait_for_timeout(500)
    st1 = kit.state()
    assert st1["setup-key"] == st0["setup-key"] and st1["computations"] == st0["computations"]
    assert st1["camera-sum"] == st0["camera-sum"]
    assert float(pg.locator(".fb-camera-exposure input").first.input_value()) == 0.05


# ----------------------------------------------------------------- true colour


def _rgb_sums(kit, st: dict) -> dict:
    """The channel sums of the true-colour map (a replaced map may linger: all must agree).

    The image travels in its own message: wait up to 10 s for it to arrive.
    """
    shown = []
    for _ in range(100):
        shown = [im for im in kit.page.evaluate(READ_IMAGES)["rgba"] if im["shape"] == st["shape"]]
        if shown:
            break
        kit.page.wait_for_timeout(100)
    assert shown and all(im == shown[0] for im in shown), shown
    return shown[0]


def test_true_colour_of_the_532_nm_preset_is_green_and_survives_export_import(kit, tmp_path):
    pg = kit.page
    st0 = kit.open()  # the default preset: 532 nm
    pg.locator(".fb-true-colour input").first.check()
    st1 = kit.wait_state(lambda s: s.get("colour-shown") == "1", what="the true-colour map")
    assert st1["computations"] == st0["computations"]  # display only
    rgb = _rgb_sums(kit, st1)
    # 532 nm is a saturated green outside the sRGB gamut: red and blue clip to zero
    # (CIE 1931 2° observer, CIE 015:2018; sRGB, IEC 61966-2-1).
    assert rgb["g"] > 0 and rgb["g"] > 20 * max(rgb["r"], rgb["b"]), rgb

    with pg.expect_download() as info:
        pg.locator(".fb-export a, .fb-export button").first.click()
    path = tmp_path / "colour.json"
    info.value.save_as(path)
    assert json.loads(path.read_text())["view"]["true_colour"] is True

    pg.locator(".fb-true-colour input").first.uncheck()
    kit.wait_state(lambda s: s.get("colour-on") == "0", what="the switch off")
    pg.locator(".fb-import input[type=file]").set_input_files(str(path))
    st2 = kit.wait_state(
        lambda s: s.get("colour-on") == "1" and s.get("colour-shown") == "1",
        what="the imported view",
    )
    assert pg.locator(".fb-true-colour input").first.is_checked()
    assert _rgb_sums(kit, st2)["g"] == rgb["g"]
    assert pg.console_errors == []
