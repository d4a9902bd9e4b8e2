"""Real sources and cameras in the dashboard, no browser: spectrum, source size, camera, colour.

The dashboards compute in the calling thread (``threaded=False``); no server and no
browser are involved. Setups are our own demo settings (invented data).
"""

from __future__ import annotations

import json

import holoviews as hv
import numpy as np
import pytest

import server.app  # noqa: F401  (loads the plotting extension, as the app does)
from compute import camera as cam
from compute import colour, engine, snapshot
from compute.model import Aperture, Rect, Screen, Setup, Source
from server import camera_panel, colour_view
from server.dashboard import Dashboard

H_PLANCK = 6.62607015e-34  # J s, exact (BIPM, SI Brochure, 9th ed., 2019)
C_LIGHT = 299_792_458.0  # m/s, exact (BIPM, SI Brochure, 9th ed., 2019)


def _double_slit(wavelength: float = 5.32e-7) -> Setup:
    """Demo setup: two 40 µm slits 300 µm apart, screen 1 m behind (invented data)."""
    return Setup(
        source=Source(kind="plane", wavelength=wavelength, irradiance=100.0),
        aperture=Aperture(
            elements=[
                Rect(x=-1.5e-4, width=4e-5, height=1e-3),
                Rect(x=1.5e-4, width=4e-5, height=1e-3),
            ]
        ),
        screen=Screen(distance=1.0, width=0.02, height=0.004, samples=200),
    )


def _uniform() -> Setup:
    """A clear aperture: the screen (and a camera on it) receives the plane wave alone."""
    return Setup(
        source=Source(kind="plane", wavelength=5.32e-7, irradiance=3.0),
        aperture=Aperture(background="clear", elements=[]),
        screen=Screen(distance=0.5, width=0.01, height=0.01, samples=40),
    )


@pytest.fixture
def dash() -> Dashboard:
    d = Dashboard(_double_slit(), threaded=False)
    assert d.result is not None, d.messages
    return d


def _camera_on(d: Dashboard, **settings) -> None:
    """Switch the camera on in the editor, then type each setting in display units."""
    d.source_camera.camera.toggle.value = True
    assert d.setup.camera is not None, d.messages
    for name, value in settings.items():
        d.source_camera.camera.quantities[name].widget.value = value


# ----------------------------------------------------------------- source controls


def test_spectrum_controls_write_si_values_and_show_only_what_applies(dash):
    sc = dash.source_camera.spectrum
    assert not sc.quantities["bandwidth"].widget.visible  # monochromatic: no width
    sc.shape.widget.value = "gaussian"
    assert dash.setup.source.spectrum == "gaussian"
    assert sc.quantities["bandwidth"].widget.visible
    assert "FWHM" in sc.quantities["bandwidth"].widget.label
    sc.quantities["bandwidth"].widget.value = 25.0  # nm
    assert dash.setup.source.bandwidth == pytest.approx(2.5e-8, rel=1e-12)
    sc.quantities["spectral_samples"].widget.value = 9
    assert dash.setup.source.spectral_samples == 9
    sc.quantities["source_diameter"].widget.value = 0.5  # mrad
    assert dash.setup.source.source_diameter == pytest.approx(5e-4, rel=1e-12)
    assert dash.result.key == snapshot.physics_hash(dash.setup)
    sc.shape.widget.value = "flat"
    assert "full width" in sc.quantities["bandwidth"].widget.label


def test_a_bandwidth_beyond_the_model_rule_is_refused_and_changes_nothing(dash):
    sc = dash.source_camera.spectrum
    sc.shape.widget.value = "gaussian"
    before, runs = snapshot.physics_hash(dash.setup), dash.computations
    sc.quantities["bandwidth"].widget.value = 400.0  # nm: a FWHM above 0.6 λ reaches λ = 0
    level, text = dash.messages[-1]
    assert level == "error" and text.startswith("“Bandwidth”: a Gaussian spectrum"), text
    assert snapshot.physics_hash(dash.setup) == before and dash.computations == runs
    assert sc.quantities["bandwidth"].widget.value == pytest.approx(10.0)  # shown again


def test_bandwidth_lowers_the_visibility_read_off_the_result(dash):
    mono = dash.result.intensity.copy()
    dash.source_camera.spectrum.shape.widget.value = "flat"
    dash.source_camera.spectrum.quantities["bandwidth"].widget.value = 120.0
    assert "xyz" in dash.result.extras  # a broad-band screen carries its colour

    def contrast(img: np.ndarray, x: np.ndarray) -> float:
        row = img[img.shape[0] // 2]
        near = np.abs(x - 6e-3) < 1.8e-3  # two fringes around x = 6 mm
        return float((row[near].max() - row[near].min()) / (row[near].max() + row[near].min()))

    # Fringes wash out where the path difference d·x/z (here ≈ 1.8 µm) nears the
    # coherence length λ²/Δλ ≈ 2.4 µm (Born & Wolf, Principles of Optics, 7th ed., ch. 10;
    # Goodman, Statistical Optics, ch. 5).
    x = dash.result.x
    assert contrast(dash.result.intensity, x) < 0.6 * contrast(mono, x)


# ----------------------------------------------------------------- camera editor


def test_camera_switch_adds_a_centred_camera_and_removes_it():
    setup = _double_slit()
    setup.screen.x = 1e-3
    d = Dashboard(setup, threaded=False)
    assert not d.camera_slot.visible and d.state_extra["camera-on"] == 0
    assert not d.source_camera.camera.settings.visible
    d.source_camera.camera.toggle.value = True
    assert d.setup.camera is not None and d.setup.camera.offset_x == pytest.approx(1e-3)
    assert d.source_camera.camera.settings.visible
    assert d.camera_slot.visible and d.state_extra["camera-on"] == 1
    assert d.state_extra["camera-shape"] == "1024x1280"  # the model's default sensor
    assert d.state_extra["camera-factor"] == 2  # shown in 2×2 blocks
    d.source_camera.camera.toggle.value = False
    assert d.setup.camera is None
    assert not d.camera_slot.visible and d.state_extra["camera-on"] == 0
    assert "camera-sum" not in d.state_extra


def test_camera_settings_convert_display_units_to_si(dash):
    _camera_on(dash, pixel_pitch=3.45, pixels_x=200, pixels_y=150, exposure=0.2, offset_x=-1.5)
    c = dash.setup.camera
    assert c.pixel_pitch == pytest.approx(3.45e-6, rel=1e-12)
    assert (c.pixels_x, c.pixels_y) == (200, 150)
    assert c.exposure == pytest.approx(2e-4, rel=1e-12)
    assert c.offset_x == pytest.approx(-1.5e-3, rel=1e-12)
    dash.source_camera.camera.shot_noise.value = False
    assert dash.setup.camera.shot_noise is False
    assert dash.state_extra["camera-shape"] == "150x200"
    # The frame on the page is the engine's frame for the same setup.
    counts = engine.compute(dash.setup).extras["counts"]
    assert dash.state_extra["camera-sum"] == int(counts.sum(dtype=np.int64))
    assert dash.state_extra["camera-peak"] == int(counts.max())


@pytest.mark.parametrize(
    ("name", "value", "words"),
    [
        ("exposure", 0.0, "Exposure must be more than 0 ms; it stays at 0.05 ms"),
        ("fill_factor", 1.5, "Fill factor must be at most 1; it stays at 1"),
        ("pixel_pitch", float("nan"), "Pixel pitch needs a number; it stays at 5 µm"),
    ],
)
def test_a_bad_camera_value_is_a_clear_message_and_changes_nothing(dash, name, value, words):
    _camera_on(dash, pixels_x=64, pixels_y=48)
    before, runs, frame = (
        snapshot.physics_hash(dash.setup),
        dash.computations,
        dict(dash.state_extra),
    )
    assert not dash.source_camera.set_camera_value(f"camera.{name}", value)
    level, text = dash.messages[-1]
    assert level == "error" and text.startswith(words), text
    assert snapshot.physics_hash(dash.setup) == before and dash.computations == runs
    assert dash.state_extra == frame
    shown = dash.source_camera.camera.quantities[name].widget.value
    assert shown == pytest.approx({"exposure": 0.05, "fill_factor": 1.0, "pixel_pitch": 5.0}[name])


def test_camera_settings_are_refused_without_a_camera(dash):
    before = snapshot.physics_hash(dash.setup)
    assert not dash.source_camera.set_camera_value("camera.exposure", 1e-3)
    assert "there is no camera" in dash.messages[-1][1]
    assert snapshot.physics_hash(dash.setup) == before


# ------------------------------------------------------------------- camera panel


def test_uniform_light_gives_the_counts_of_the_camera_equation():
    d = Dashboard(_uniform(), threaded=False)
    _camera_on(
        d,
        pixel_pitch=4.0,
        pixels_x=30,
        pixels_y=20,
        fill_factor=0.5,
        quantum_efficiency=0.7,
        exposure=0.5,
        full_well=8e4,
        bit_depth=12,
        read_noise=0.0,
    )
    d.source_camera.camera.shot_noise.value = False
    # Photoelectrons = E · A_active · t · η / (h c / λ); DN = N (2^b − 1) / N_fw
    # (EMVA Standard 1288, release 4.0, the linear camera model).
    electrons = 3.0 * (4e-6) ** 2 * 0.5 * 5e-4 * 0.7 / (H_PLANCK * C_LIGHT / 5.32e-7)
    dn = round(electrons * 4095 / 8e4)
    st = d.state_extra
    assert st["camera-peak"] == dn and st["camera-sum"] == dn * 600
    assert d.source_camera.panel.summary["mean_electrons"] == pytest.approx(electrons, rel=1e-6)
    assert st["camera-saturated"] == 0
    text = d.source_camera.panel.readings.object
    assert f"{dn} / 4095 DN" in text and "0 px (0 %)" in text


def test_a_saturating_exposure_marks_the_saturated_pixels(dash):
    _camera_on(dash, pixel_pitch=10.0, pixels_x=160, pixels_y=60)
    assert dash.state_extra["camera-saturated"] == 0
    marks = dash.source_camera.panel.frame_pane.object[()].get(1)
    assert np.isnan(marks.dimension_values(2)).all()  # nothing marked
    dash.source_camera.camera.quantities["exposure"].widget.value = 20.0  # ms: 400× longer
    extras = engine.compute(dash.setup).extras
    n_sat = int(extras["saturated"].sum())
    assert n_sat > 0 and dash.state_extra["camera-saturated"] == n_sat
    frame, marks = dash.source_camera.panel.frame_pane.object[()]
    assert frame.dimension_values(2).max() == 4095
    mask = marks.dimension_values(2, flat=False)
    assert int(np.nansum(mask)) == n_sat == int(np.sum(mask == 1.0))
    assert f"{n_sat} px" in dash.source_camera.panel.readings.object
    # The histogram covers every pixel, the full-scale line sits at 2^12 − 1.
    bars, line = dash.source_camera.panel.histogram_pane.object[()]
    assert bars.dimension_values("pixels").sum() == 160 * 60
    # 256 bins of 16 DN: the last one, up to full scale, holds the counts from 4080 DN.
    last = int(np.argmax(bars.dimension_values(2)))
    assert bars.dimension_values(2)[last] == 4095.5
    assert bars.dimension_values(3)[last] == int((extras["counts"] >= 4080).sum())
    assert line.data == 4095


def test_the_sampling_verdict_of_the_report_is_in_the_readings(dash):
    # Fringes λz/d = 1.77 mm apart on 1 mm pixels are below two pixels a period
    # (Nyquist–Shannon: two samples per period; Goodman, Fourier Optics, 3rd ed., §2.4).
    _camera_on(dash, pixel_pitch=1000.0, pixels_x=16, pixels_y=4)
    assert dash.state_extra["camera-sampling"] == "invalid"
    assert 'data-sampling="invalid"' in dash.source_camera.panel.readings.object
    assert "not resolved" in dash.source_camera.panel.readings.object


def test_a_large_frame_is_shown_in_blocks_that_keep_its_mean():
    rng = np.random.default_rng(3)
    counts = rng.integers(0, 4096, size=(1030, 1700)).astype(np.uint16)
    sat = counts > 4090
    x, y = np.arange(1700) * 1e-6, np.arange(1030) * 1e-6
    bx, by, dn, bsat, f = camera_panel.display_frame(x, y, counts, sat, 800)
    # Block means for display: common practice, no source.
    assert f == 3 and dn.shape == (344, 567) and bx.shape == (567,) and by.shape == (344,)
    # Block means weighted by the block sizes give back the frame's total (exact sums).
    sizes = np.outer([3] * 343 + [1], [3] * 566 + [2])
    assert float((dn.astype(np.float64) * sizes).sum()) == pytest.approx(
        float(counts.sum(dtype=np.int64)), rel=1e-6
    )
    assert bsat.sum() >= 1 and bsat[0, 0] == sat[:3, :3].any()
    assert bx[0] == pytest.approx(1e-6) and by[-1] == pytest.approx(1029e-6)


def test_the_camera_panel_hides_when_a_result_has_no_frame(dash):
    _camera_on(dash, pixels_x=32, pixels_y=32)
    assert dash.camera_slot.visible
    dash.source_camera.panel.show(dash.setup, engine.compute(_double_slit()))
    assert not dash.camera_slot.visible and dash.state_extra["camera-on"] == 0


# ------------------------------------------------------------------- true colour


def _map_kind(d: Dashboard) -> str:
    """What the map figure shows: ``'rgb'`` (true colour) or ``'image'`` (irradiance)."""
    plot = d._map_plot
    assert d.map_pane.object is plot.figure
    if plot.rgba.visible:
        assert not plot.image.visible and len(plot.rgba_source.data["image"]) == 1
        return "rgb"
    assert plot.image.visible and len(plot.rgba_source.data["image"]) == 0
    return "image"


def _map_rgb(d: Dashboard) -> np.ndarray:
    """The true-colour image the map figure holds, (ny, nx, 4) bytes (RGBA)."""
    packed = np.asarray(d._map_plot.rgba_source.data["image"][0])
    return packed.view(np.uint8).reshape(*packed.shape, 4)


def test_true_colour_of_532_nm_is_green_and_computes_nothing(dash):
    runs, key = dash.computations, dash.result.key
    assert _map_kind(dash) == "image"
    dash.true_colour.toggle.value = True
    assert _map_kind(dash) == "rgb"
    img = _map_rgb(dash)
    r, g, b = (float(img[..., c].sum()) for c in range(3))
    # 532 nm lies outside the sRGB gamut on the green side: clipped, it is pure green
    # (CIE 1931 2° observer, CIE 015:2018; sRGB matrix, IEC 61966-2-1).
    assert g > 0 and r == pytest.approx(0.0, abs=1e-9) and b == pytest.approx(0.0, abs=1e-9)
    assert dash.state_extra["colour-shown"] == 1
    assert dash.computations == runs and dash.result.key == key
    # Same place and pixels as the irradiance map, in mm.
    assert img.shape[:2] == dash.result.intensity.shape
    rgba, irr = dash._map_plot.rgba_source.data, dash._map_plot.source.data
    for k in ("x", "y", "dw", "dh"):
        assert rgba[k] == irr[k]
    dx = dash.result.x[1] - dash.result.x[0]
    assert rgba["x"][0] == pytest.approx((dash.result.x[0] - dx / 2) * 1e3)
    dash.true_colour.toggle.value = False
    assert _map_kind(dash) == "image"
    assert dash.state_extra["colour-shown"] == 0


@pytest.mark.parametrize(("nm", "dominant"), [(450, 2), (610, 0)])
def test_true_colour_follows_the_wavelength(nm, dominant):
    d = Dashboard(_double_slit(nm * 1e-9), threaded=False)
    d.true_colour.toggle.value = True
    means = [float(v) for v in d.state_extra["colour-mean"].split(",")]
    # 450 nm is blue, 610 nm red-orange (CIE 1931 2° observer; IEC 61966-2-1 sRGB).
    assert int(np.argmax(means)) == dominant, means


def test_a_broad_band_source_renders_its_summed_colour(dash):
    dash.source_camera.spectrum.shape.widget.value = "flat"
    dash.source_camera.spectrum.quantities["bandwidth"].widget.value = 300.0  # 382–682 nm
    dash.true_colour.toggle.value = True
    expected = colour.true_colour_image(dash.result, dash.setup.source)
    assert dash.state_extra["colour-mean"] == ",".join(
        f"{v:.3f}" for v in colour_view.mean_rgb(expected)
    )
    means = [float(v) for v in dash.state_extra["colour-mean"].split(",")]
    # A band from violet to red mixes into a whitish colour: every channel is lit
    # (CIE 1931 2° observer; IEC 61966-2-1), unlike the pure green of one line at 532 nm.
    assert min(means) > 0.3 * max(means), means


def test_invisible_light_disables_true_colour_and_says_why(dash):
    dash.true_colour.toggle.value = True
    assert dash.set_value("source.wavelength", 1.064e-6)
    assert dash.true_colour.toggle.disabled
    assert "outside the visible band" in dash.true_colour.note.object
    assert _map_kind(dash) == "image"  # the irradiance map instead
    assert dash.state_extra["colour-visible"] == 0 and dash.state_extra["colour-shown"] == 0
    assert not colour_view.visible_light(dash.setup.source)
    # Back in the visible, the switch (still on) shows the colour again.
    assert dash.set_value("source.wavelength", 6.33e-7)
    assert not dash.true_colour.toggle.disabled
    assert _map_kind(dash) == "rgb"


def test_a_band_reaching_into_the_visible_counts_as_visible():
    src = Source(wavelength=8.0e-7, spectrum="flat", bandwidth=1.0e-7)  # 750–850 nm
    assert colour_view.visible_light(src)
    assert not colour_view.visible_light(Source(wavelength=3.0e-7))


def test_true_colour_is_saved_in_the_view_and_read_back(dash):
    dash.true_colour.toggle.value = True
    text = dash.export_snapshot()
    assert json.loads(text)["view"]["true_colour"] is True
    dash.true_colour.toggle.value = False
    assert dash.import_snapshot(text.encode(), name="saved.json")
    assert dash.true_colour.toggle.value is True
    assert _map_kind(dash) == "rgb"
    # A snapshot whose view does not say switches it off.
    doc = json.loads(text)
    doc["view"] = {}
    assert dash.import_snapshot(json.dumps(doc).encode())
    assert dash.true_colour.toggle.value is False
    assert dash.view_state()["true_colour"] is False


def test_camera_setup_survives_export_and_import(dash):
    _camera_on(dash, pixels_x=40, pixels_y=30, bit_depth=10)
    text = dash.export_snapshot()
    dash.source_camera.camera.toggle.value = False
    assert dash.import_snapshot(text.encode())
    assert dash.setup.camera is not None and dash.setup.camera.bit_depth == 10
    assert dash.source_camera.camera.toggle.value is True
    assert dash.source_camera.camera.quantities["bit_depth"].widget.value == 10
    assert dash.state_extra["camera-full-scale"] == cam.full_scale(dash.setup.camera) == 1023


def test_the_camera_frame_is_in_the_dashboard_layout(dash):
    _camera_on(dash, pixels_x=32, pixels_y=24)
    layout = dash.__panel__()
    found = layout.select(lambda o: o is dash.source_camera.panel.frame_pane)
    assert found and dash.camera_slot.visible
    assert isinstance(dash.source_camera.panel.frame_pane.object[()].get(0), hv.Image)
