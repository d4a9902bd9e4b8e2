"""The camera: pixel-area integration, photoelectrons, digital numbers, the sensor report."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import integrate

from compute import camera as cam
from compute import engine, incoherent, snapshot
from compute.engine import ResultCache
from compute.model import Aperture, Camera, Numerics, Rect, Screen, Setup, Source
from server import cli

H_PLANCK = 6.62607015e-34  # J s, exact since 2019 (BIPM, SI Brochure, 9th ed.)
C_LIGHT = 299_792_458.0  # m/s, exact (BIPM, SI Brochure, 9th ed.)


def quiet_camera(**kw) -> Camera:
    """A noise-free camera: the frame is the mean signal."""
    values = {"read_noise": 0.0, "shot_noise": False, "full_well": 1e9, "bit_depth": 16}
    values.update(kw)
    return Camera(**values)


def uniform(camera: Camera, *, lam=532e-9, irradiance=3.0) -> Setup:
    """A clear aperture: the screen receives the plane wave, uniform."""
    return Setup(
        source=Source(kind="plane", wavelength=lam, irradiance=irradiance),
        aperture=Aperture(background="clear", elements=[]),
        screen=Screen(distance=0.5, width=0.01, height=0.01, samples=40),
        camera=camera,
    )


# -- uniform light: the radiometric chain ------------------------------------------------


@pytest.mark.parametrize(("fill", "qe", "bits"), [(1.0, 0.6, 12), (0.45, 0.8, 10), (0.7, 0.3, 20)])
def test_uniform_light_gives_the_counts_of_the_camera_equation(fill, qe, bits):
    c = quiet_camera(
        pixel_pitch=4e-6,
        pixels_x=30,
        pixels_y=20,
        fill_factor=fill,
        quantum_efficiency=qe,
        exposure=5e-4,
        full_well=8e4,
        bit_depth=bits,
    )
    res = engine.compute(uniform(c, irradiance=3.0), use_cache=False)
    # Photoelectrons = E · A_active · t · η / (h c / λ); DN = N (2^b − 1)/N_fw
    # (EMVA Standard 1288, release 4.0, linear camera model; Janesick, Photon Transfer,
    # SPIE 2007).
    electrons = 3.0 * (4e-6) ** 2 * fill * 5e-4 * qe / (H_PLANCK * C_LIGHT / 532e-9)
    dn = round(electrons * (2**bits - 1) / 8e4)
    ex = res.extras
    assert ex["electrons"] == pytest.approx(np.full((20, 30), electrons), rel=1e-6)
    assert np.all(ex["counts"] == dn)
    assert ex["counts"].dtype == (np.uint16 if bits <= 16 else np.uint32)
    assert not ex["saturated"].any()
    x, y = cam.sensor_axes(c)
    assert np.array_equal(ex["camera_x"], x) and np.array_equal(ex["camera_y"], y)
    assert x[1] - x[0] == pytest.approx(4e-6) and x.mean() == pytest.approx(0.0, abs=1e-15)


def test_saturation_is_flagged_and_clipped_to_full_scale():
    c = quiet_camera(
        pixel_pitch=5e-6, pixels_x=8, pixels_y=6, exposure=1.0, full_well=1e4, bit_depth=8
    )
    res = engine.compute(uniform(c), use_cache=False)
    assert res.extras["saturated"].all()
    assert np.all(res.extras["counts"] == 255)
    item = {v.key: v for v in res.validity}["camera_exposure"]
    assert item.verdict == "invalid" and "48 pixels" in item.sentence
    # The same light, exposed a hundred thousand times shorter, fits the full well.
    c.exposure = 1e-5
    res = engine.compute(uniform(c), use_cache=False)
    assert not res.extras["saturated"].any() and res.extras["counts"].max() < 255
    assert {v.key: v for v in res.validity}["camera_exposure"].verdict == "ok"


def test_shot_and_read_noise_have_their_statistics_and_repeat_with_the_seed():
    c = Camera(
        pixel_pitch=5e-6,
        pixels_x=200,
        pixels_y=150,
        full_well=1e6,
        bit_depth=20,
        read_noise=0.0,
        shot_noise=True,
        seed=7,
        exposure=1e-4,
    )
    frame = cam.digitise(np.full((150, 200), 900.0), c)  # 900 photons → 540 e⁻ at η = 0.6
    e = frame["counts"].astype(float) * c.full_well / cam.full_scale(c)
    # Photon shot noise is Poisson: variance = mean (Janesick, Photon Transfer, ch. 2).
    assert e.mean() == pytest.approx(540.0, rel=0.01)
    assert e.var() == pytest.approx(540.0, rel=0.05)
    again = cam.digitise(np.full((150, 200), 900.0), c)
    assert np.array_equal(again["counts"], frame["counts"])
    c.seed = 8
    assert not np.array_equal(
        cam.digitise(np.full((150, 200), 900.0), c)["counts"], frame["counts"]
    )
    c.shot_noise, c.read_noise = False, 12.0
    e = cam.digitise(np.full((150, 200), 900.0), c)["counts"] * c.full_well / cam.full_scale(c)
    # Read noise adds a Gaussian of σ_read electrons (EMVA 1288, release 4.0).
    assert e.std() == pytest.approx(12.0, rel=0.05)


# -- pixel integration ---------------------------------------------------------------


@pytest.mark.parametrize("k", [3, 5, 9, 21])
@pytest.mark.parametrize("active", [1.0, math.sqrt(0.5), 0.3])
def test_box_stencil_integrates_cubics_exactly(k, active):
    start, w = cam.box_stencil(k, active)
    u = np.arange(start, start + w.size, dtype=float)
    a0 = cam.STENCIL_MARGIN - 0.5 + 0.5 * k * (1 - active)
    a1 = a0 + k * active
    for coeffs in ([1.0], [0.0, 1.0], [0.3, -0.2, 0.05], [1.0, 0.5, -0.1, 0.01]):
        poly = np.polynomial.Polynomial(coeffs)
        exact = poly.integ()(a1) - poly.integ()(a0)  # the antiderivative, exactly
        assert float(w @ poly(u)) == pytest.approx(exact, rel=1e-12, abs=1e-12)
    assert w.sum() == pytest.approx(active * k, rel=1e-13)


LAM, Z, SLIT, SEP, TALL, I0 = 633e-9, 0.1, 20e-6, 200e-6, 100e-6, 50.0


def two_slits(camera: Camera) -> Setup:
    """Two slits in the far field; a fine aperture grid makes the engine exact here."""
    return Setup(
        source=Source(kind="plane", wavelength=LAM, irradiance=I0),
        aperture=Aperture(
            background="opaque",
            elements=[
                Rect(x=-SEP / 2, y=0.0, width=SLIT, height=TALL),
                Rect(x=SEP / 2, y=0.0, width=SLIT, height=TALL),
            ],
        ),
        screen=Screen(distance=Z, width=0.02, height=0.004, samples=200),
        numerics=Numerics(method="fraunhofer", grid=2048, precision="double"),
        camera=camera,
    )


def _fx(x):
    return np.sinc(SLIT * x / (LAM * Z)) ** 2 * 4 * np.cos(np.pi * SEP * x / (LAM * Z)) ** 2


def _gy(y):
    return np.sinc(TALL * y / (LAM * Z)) ** 2


@pytest.mark.parametrize("periods_per_pixel", [1 / 1.2, 1 / 2.5])
@pytest.mark.parametrize("fill", [1.0, 0.5])
def test_pixels_integrate_fringes_near_the_pitch_like_the_box_filter(periods_per_pixel, fill):
    period = LAM * Z / SEP
    pitch = period * periods_per_pixel
    c = quiet_camera(
        pixel_pitch=pitch,
        pixels_x=16,
        pixels_y=3,
        offset_x=0.2e-3,
        fill_factor=fill,
        quantum_efficiency=0.5,
        exposure=1e-3,
    )
    res = engine.compute(two_slits(c), use_cache=False)
    # Far field of two slits: I = I0 (a h/(λz))² sinc²(ax/λz) sinc²(hy/λz) 4cos²(πdx/λz)
    # (Goodman, Introduction to Fourier Optics, 3rd ed., §4.4.1; Hecht, Optics, 5th ed.,
    # §10.2.2); each pixel integrates it over its active square (the box filter), here by
    # scipy.integrate.quad.
    x, y = cam.sensor_axes(c)
    half = 0.5 * pitch * math.sqrt(fill)
    ex = [integrate.quad(_fx, v - half, v + half, limit=200, epsrel=1e-12)[0] for v in x]
    gy = [integrate.quad(_gy, v - half, v + half, limit=200, epsrel=1e-12)[0] for v in y]
    scale = I0 * (SLIT * TALL / (LAM * Z)) ** 2 * 1e-3 * 0.5 * LAM / (H_PLANCK * C_LIGHT)
    expected = scale * np.outer(gy, ex)
    got = res.extras["electrons"].astype(float)
    assert np.max(np.abs(got - expected)) < 2e-3 * expected.max()
    # Point sampling at the pixel centres would be far off: the integration is real.
    point = scale * np.outer(_gy(y), _fx(x)) * pitch**2 * fill
    assert np.max(np.abs(point - expected)) > 0.05 * expected.max()


def test_tiles_join_without_a_seam(monkeypatch):
    c = quiet_camera(pixel_pitch=20e-6, pixels_x=40, pixels_y=12, quantum_efficiency=0.5)
    setup = two_slits(c)
    setup.numerics.grid = 0
    whole = engine.compute(setup, use_cache=False).extras["electrons"]
    monkeypatch.setattr(cam, "TILE_SAMPLES", 34)
    assert len(incoherent.route(setup).tiles) > 4
    tiled = engine.compute(setup, use_cache=False).extras["electrons"]
    assert np.allclose(tiled, whole, rtol=1e-5, atol=1e-6 * whole.max())


# -- the report ----------------------------------------------------------------------


def test_nyquist_item_flags_fringes_finer_than_two_pixels():
    period = LAM * Z / SEP  # the two-slit fringe period (Hecht, Optics, §9.3)
    coarse = quiet_camera(pixel_pitch=0.6 * period, pixels_x=20, pixels_y=4)
    fine = quiet_camera(pixel_pitch=0.2 * period, pixels_x=20, pixels_y=4)
    flagged = {v.key: v for v in incoherent.check(two_slits(coarse)).validity}
    passed = {v.key: v for v in incoherent.check(two_slits(fine)).validity}
    # Sampling theorem: a period needs more than two pixels (Goodman, Introduction to
    # Fourier Optics, 3rd ed., §2.4).
    assert flagged["camera_sampling"].verdict != "ok"
    assert flagged["camera_sampling"].value < 1.0 and "cannot resolve" in (
        flagged["camera_sampling"].sentence
    )
    assert passed["camera_sampling"].verdict == "ok" and passed["camera_sampling"].value > 1.0


def test_coverage_item_says_whether_the_pattern_fits_the_sensor():
    big = quiet_camera(pixel_pitch=50e-6, pixels_x=400, pixels_y=160, quantum_efficiency=0.5)
    setup = two_slits(big)
    setup.numerics.grid = 0
    res = engine.compute(setup, use_cache=False)
    item = {v.key: v for v in res.validity}["camera_coverage"]
    assert item.verdict == "ok" and item.value > 0.9
    small = quiet_camera(pixel_pitch=5e-6, pixels_x=40, pixels_y=40, offset_x=1e-3)
    setup = two_slits(small)
    setup.numerics.grid = 0
    item = {v.key: v for v in engine.compute(setup, use_cache=False).validity}["camera_coverage"]
    assert item.verdict != "ok" and item.value < 0.1 and "falls off" in item.sentence


def test_read_out_settings_reuse_the_light_on_the_sensor(monkeypatch):
    cache = ResultCache()
    c = quiet_camera(pixel_pitch=20e-6, pixels_x=20, pixels_y=10)
    setup = two_slits(c)
    setup.numerics.grid = 0
    first = engine.compute(setup, cache=cache)
    propagations = []
    original = engine._propagate

    def counting(*args, **kw):
        propagations.append(args)
        return original(*args, **kw)

    monkeypatch.setattr(engine, "_propagate", counting)
    c.exposure *= 2
    second = engine.compute(setup, cache=cache)
    # The screen and the photon rates on the sensor come from the cache: no propagation.
    assert propagations == []
    assert not second.cached
    assert np.allclose(second.extras["electrons"], 2 * first.extras["electrons"], rtol=1e-6)
    c.offset_x += 1e-4  # the sensor moves: its light must be computed again
    engine.compute(setup, cache=cache)
    assert len(propagations) >= 1


# -- snapshots and the command line ---------------------------------------------------


def test_camera_section_round_trips_and_enters_the_hash():
    setup = two_slits(Camera(pixel_pitch=3.45e-6, pixels_x=2448, pixels_y=2048, seed=3))
    doc = snapshot.to_dict(setup)
    assert list(doc)[-2:] == ["camera", "view"]
    assert doc["camera"]["pixel_pitch"] == 3.45e-6 and doc["camera"]["shot_noise"] is True
    again = snapshot.from_dict(json.loads(snapshot.dumps(setup)))
    assert snapshot.to_dict(again) == doc
    assert "camera" in json.loads(snapshot.canonical_json(setup))
    without = two_slits(None)
    assert "camera" not in snapshot.to_dict(without)
    assert snapshot.physics_hash(without) != snapshot.physics_hash(setup)
    doc["camera"] = None
    assert snapshot.from_dict(doc).camera is None


@pytest.mark.parametrize(
    ("key", "value", "fragment"),
    [
        ("shot_noise", 1, "true or false"),
        ("bit_depth", 33, "at most"),
        ("fill_factor", 0.0, "(0, 1]"),
        ("pixel_pitch", None, "missing"),
        ("lens", 1.0, "unknown key"),
    ],
)
def test_bad_camera_keys_name_their_path(key, value, fragment):
    doc = snapshot.to_dict(two_slits(Camera()))
    if value is None:
        del doc["camera"][key]
    else:
        doc["camera"][key] = value
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.from_dict(doc)
    path, message = info.value.errors[0]
    assert path == f"camera.{key}"
    assert fragment in message or (fragment == "at most" and "[1, 32]" in message)


def test_render_writes_the_camera_frame(tmp_path):
    c = Camera(pixel_pitch=20e-6, pixels_x=24, pixels_y=10, bit_depth=12)
    setup = two_slits(c)
    setup.numerics.grid = 0
    snap = tmp_path / "cam.json"
    snapshot.save(setup, snap)
    out = tmp_path / "r.npz"
    assert cli.main(["render", str(snap), "--out", str(out)]) == 0
    data = np.load(out)
    assert data["counts"].shape == (10, 24) and data["counts"].dtype == np.uint16
    assert data["camera_x"].shape == (24,) and data["camera_y"].shape == (10,)
    assert data["saturated"].dtype == bool
    assert data["counts"].max() > 0
    plain = tmp_path / "plain.json"
    snapshot.save(two_slits(None), plain)
    assert cli.main(["render", str(plain), "--out", str(tmp_path / "p.npz")]) == 0
    assert "counts" not in np.load(tmp_path / "p.npz").files


def test_a_frame_too_large_to_compute_is_refused_with_a_message():
    from compute.errors import SetupError

    c = Camera(pixel_pitch=2e-6, pixels_x=4096, pixels_y=4096)
    setup = two_slits(c)
    setup.source.spectrum, setup.source.bandwidth, setup.source.spectral_samples = (
        "gaussian",
        20e-9,
        64,
    )
    with pytest.raises(SetupError) as info:
        incoherent.route(setup)
    assert info.value.path == "camera.pixels_x" and "limit" in info.value.message
