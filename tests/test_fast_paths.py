"""Every optimised path gives the numbers of the straightforward one.

The references here are the plain numpy formulas, written out as a reader would
write them from the textbook: the convolution theorem (IFFT[FFT(u)·H]), the
Fresnel transfer function (Goodman, *Introduction to Fourier Optics*, 3rd ed.,
§4.2.3, eq. 4-21) and the band-limited angular spectrum (Goodman §3.10.2;
Matsushima & Shimobaba, Opt. Express 17, 19662 (2009), eq. 13). That the fast
code must equal them to float rounding is common practice, no source.
"""

from __future__ import annotations

import io
import json
import math
from contextlib import redirect_stdout

import numpy as np
import pytest
from benchsetup import bench

from compute import engine, model, propagators
from compute import fft as cfft
from server import benchmark, cli

LAM = 632.8e-9


@pytest.fixture(autouse=True)
def _forget_backend_choices():
    """Leave no measured backend choice behind for the other tests of the run."""
    saved = [(d, dict(d)) for d in (cfft._choice, cfft._speed, cfft._calls)]
    yield
    for d, before in saved:
        d.clear()
        d.update(before)


def _random(shape, dtype, seed=0):
    rng = np.random.default_rng(seed)
    return (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)).astype(dtype)


def _rel(a, b) -> float:
    return float(np.max(np.abs(np.asarray(a) - np.asarray(b))) / np.max(np.abs(b)))


def plain_fresnel_kernel(shape, dx, dy, lam, z):
    """exp(ikz) exp(−iπλz(fx² + fy²)) in complex128 (Goodman §4.2.3, eq. 4-21)."""
    fx = np.fft.fftfreq(shape[1], dx)
    fy = np.fft.fftfreq(shape[0], dy)
    gx, gy = np.meshgrid(fx, fy)
    return np.exp(2j * math.pi * z / lam) * np.exp(-1j * math.pi * lam * z * (gx**2 + gy**2))


def plain_angular_spectrum_kernel(shape, dx, dy, lam, z, rolloff=0.2):
    """exp(2πiz√(1/λ² − f²)), evanescent decay, and the band window, in complex128.

    Goodman §3.10.2 for the transfer function; Matsushima & Shimobaba (2009),
    eq. 13 for the band limit; the raised-cosine roll-off is
    ``propagators._band_window``, used as is.
    """
    fx = np.fft.fftfreq(shape[1], dx)
    fy = np.fft.fftfreq(shape[0], dy)
    gx, gy = np.meshgrid(fx, fy)
    arg = 1.0 / lam**2 - gx**2 - gy**2
    h = np.where(
        arg >= 0,
        np.exp(2j * math.pi * z * np.sqrt(np.abs(arg))),
        np.exp(-2 * math.pi * z * np.sqrt(np.abs(arg))),
    )
    ux = propagators.band_limit(shape[1], dx, lam, z)
    uy = propagators.band_limit(shape[0], dy, lam, z)
    wx = propagators._band_window(fx, ux, lam, rolloff)
    wy = propagators._band_window(fy, uy, lam, rolloff)
    return h * wy[:, None] * wx[None, :]


# --------------------------------------------------------------------------- kernels

KERNEL_CASES = [
    # shape, dx, dy, z: well sampled; band-limited (long z); evanescent corners (dx < λ/√2)
    ((96, 128), 4e-6, 5e-6, 0.01),
    ((128, 96), 2e-6, 2e-6, 0.2),
    ((64, 80), 0.3e-6, 0.35e-6, 3e-6),
]


@pytest.mark.parametrize(("shape", "dx", "dy", "z"), KERNEL_CASES)
def test_angular_spectrum_kernel_equals_the_plain_formula(shape, dx, dy, z):
    ref = plain_angular_spectrum_kernel(shape, dx, dy, LAM, z)
    fast = propagators.angular_spectrum_kernel(shape, dx, dy, LAM, z, dtype=np.complex128)
    assert fast.dtype == np.complex128
    # The plain form carries a phase of 2πz/λ (up to 1e7 rad), good to ~1e-9 in float64.
    assert np.max(np.abs(fast - ref)) < 1e-8
    single = propagators.angular_spectrum_kernel(shape, dx, dy, LAM, z, dtype=np.complex64)
    assert single.dtype == np.complex64
    assert np.max(np.abs(single - ref)) < 1e-6  # float32 rounding of a reduced phase


def test_the_cases_cover_band_limit_and_evanescent_waves():
    (_, dx, _, z) = KERNEL_CASES[1]
    assert propagators.band_limit(96, dx, LAM, z) < 0.5 / dx  # the window cuts
    (_, dx, dy, _) = KERNEL_CASES[2]
    assert (0.5 / dx) ** 2 + (0.5 / dy) ** 2 > 1 / LAM**2  # evanescent corners exist
    k = propagators.angular_spectrum_kernel((64, 80), dx, dy, LAM, 3e-6, dtype=np.complex128)
    assert np.min(np.abs(k)) < 0.5  # and decay


@pytest.mark.parametrize(("shape", "dx", "dy", "z"), KERNEL_CASES)
def test_fresnel_kernel_equals_the_plain_formula(shape, dx, dy, z):
    ref = plain_fresnel_kernel(shape, dx, dy, LAM, z)
    fast = propagators.fresnel_transfer_kernel(shape, dx, dy, LAM, z, dtype=np.complex128)
    assert np.max(np.abs(fast - ref)) < 1e-8
    single = propagators.fresnel_transfer_kernel(shape, dx, dy, LAM, z, dtype=np.complex64)
    assert single.dtype == np.complex64
    assert np.max(np.abs(single - ref)) < 1e-6


# --------------------------------------------------------------------------- backends


@pytest.mark.parametrize("backend", cfft.BACKENDS)
@pytest.mark.parametrize("dtype", [np.complex64, np.complex128])
def test_propagate_fft_equals_the_numpy_recipe(backend, dtype):
    shape = (192, 160)
    u = np.zeros(shape, dtype)
    u[48:144, 40:120] = _random((96, 80), dtype)
    kern = propagators.angular_spectrum_kernel(shape, 3e-6, 3e-6, LAM, 0.004, dtype=dtype)
    ref = np.fft.ifft2(np.fft.fft2(u.astype(np.complex128)) * kern.astype(np.complex128))
    before = u.copy()
    with cfft.use_backend(backend):
        out = propagators.propagate_fft(u, kern)
        np.testing.assert_array_equal(u, before)  # not modified without overwrite
        tmp = cfft.zeros(shape, dtype)
        tmp[...] = u
        in_place = propagators.propagate_fft(tmp, kern, overwrite=True)
    tol = 1e-5 if dtype == np.complex64 else 1e-13
    assert out.dtype == dtype
    assert _rel(out, ref) < tol
    assert _rel(in_place, ref) < tol


@pytest.mark.skipif("pyfftw" not in cfft.BACKENDS, reason="pyFFTW is not installed")
@pytest.mark.parametrize("dtype", [np.complex64, np.complex128])
def test_pyfftw_and_scipy_backends_agree(dtype):
    shape = (48, 60)  # small: measuring FFTW plans stays quick
    a = _random(shape, dtype, seed=3)
    cfft.prepare(shape, dtype)
    out = {}
    for b in ("pyfftw", "scipy"):
        with cfft.use_backend(b):
            f = cfft.fft2(a)
            out[b] = (f, cfft.ifft2(f), cfft.multiply_ifft2(f.copy(), a))
    tol = 1e-5 if dtype == np.complex64 else 1e-13
    for got, ref in zip(out["pyfftw"], out["scipy"], strict=True):
        assert got.dtype == dtype
        assert _rel(got, ref) < tol
    np.testing.assert_allclose(out["scipy"][1], a, rtol=0, atol=tol * np.abs(a).max())


@pytest.mark.skipif("pyfftw" not in cfft.BACKENDS, reason="pyFFTW is not installed")
def test_pyfftw_handles_unaligned_strided_and_real_input():
    shape = (32, 48)
    cfft.prepare(shape, np.complex128)
    a = _random((32, 49), np.complex128)
    with cfft.use_backend("pyfftw"):
        strided = cfft.fft2(a[:, 1:])  # neither contiguous nor aligned
        raw = np.empty(32 * 48 * 16 + 8, np.uint8)[8:].view(np.complex128).reshape(shape)
        raw[...] = a[:, 1:]
        unaligned = cfft.fft2(raw, overwrite=True)
        real = cfft.fft2(a[:, 1:].real.copy())
    ref = np.fft.fft2(a[:, 1:])
    assert _rel(strided, ref) < 1e-13
    assert _rel(unaligned, ref) < 1e-13
    assert _rel(real, np.fft.fft2(a[:, 1:].real)) < 1e-13


def test_fft_in_place_overwrites_and_returns_the_result():
    shape = (40, 64)
    a = cfft.zeros(shape, np.complex64)
    a[...] = _random(shape, np.complex64, seed=5)
    ref = np.fft.fft2(a.astype(np.complex128))
    for b in cfft.BACKENDS:
        with cfft.use_backend(b):
            got = cfft.fft2(a.copy() if b == "scipy" else _aligned_copy(a), overwrite=True)
        assert _rel(got, ref) < 1e-5


def _aligned_copy(a):
    out = cfft.zeros(a.shape, a.dtype)
    out[...] = a
    return out


@pytest.mark.skipif("pyfftw" not in cfft.BACKENDS, reason="pyFFTW is not installed")
def test_background_planning_picks_a_backend_and_keeps_the_numbers(monkeypatch):
    monkeypatch.setattr(cfft, "PLAN_MIN_SIZE", 0)  # plan even a small test shape
    shape, dtype = (40, 56), np.complex64
    a = _random(shape, dtype, seed=7)
    with cfft.use_backend("scipy"):
        ref = cfft.fft2(a)
    cfft.auto_plan(True)
    try:
        assert cfft.backend_for(shape, dtype) == "scipy"  # no plan yet: scipy.fft
        for _ in range(cfft.PLAN_AFTER_USES):
            cfft.fft2(a)
        cfft._jobs.join()  # the planner has finished this shape
        chosen = cfft.backend_for(shape, dtype)
        assert chosen in cfft.BACKENDS
        assert _rel(cfft.fft2(a), ref) < 1e-5
    finally:
        cfft.auto_plan(False)


@pytest.mark.skipif("pyfftw" not in cfft.BACKENDS, reason="pyFFTW is not installed")
def test_the_choice_follows_measured_times_and_exploring_keeps_the_numbers():
    shape, dtype = (48, 64), np.complex64
    cfft.prepare(shape, dtype)
    key = cfft._key(shape, dtype)
    assert set(cfft._speed[key]) == {"pyfftw", "scipy"}
    # Feed times as if the machine's load changed: the choice follows them.
    cfft._speed[key] = {"pyfftw": 1.0, "scipy": 2.0}
    cfft._record(key, "pyfftw", 1.0)
    assert cfft.backend_for(shape, dtype) == "pyfftw"
    for _ in range(8):
        cfft._record(key, "pyfftw", 9.0)
    assert cfft.backend_for(shape, dtype) == "scipy"
    # Every run, the explored ones included, gives the numbers of the reference.
    a = _random(shape, dtype, seed=11)
    ref = np.fft.fft2(a.astype(np.complex128))
    used = set()
    for _ in range(2 * cfft.EXPLORE_EVERY):
        before = dict(cfft._speed[key])
        got = cfft.fft2(a)
        used |= {b for b in before if cfft._speed[key][b] != before[b]}
        assert _rel(got, ref) < 1e-5
    assert used == {"pyfftw", "scipy"}


def test_unknown_backend_is_refused():
    with pytest.raises(ValueError, match="not available"), cfft.use_backend("cufft"):
        pass


def test_next_fast_len_has_small_factors_only():
    for n in (1, 97, 1000, 2049, 4097):
        m = cfft.next_fast_len(n)
        assert m >= n
        for p in (2, 3, 5, 7, 11):
            while m % p == 0:
                m //= p
        assert m == 1


# --------------------------------------------------------------------------- engine


def _near_field(precision: str, method: str = "angular_spectrum") -> model.Setup:
    return bench(
        model.Rect(width=4e-4, height=3e-4),
        distance=0.02,
        width=1.2e-3,
        samples=121,
        method=method,
        precision=precision,
    )


def test_cached_kernel_gives_the_numbers_of_a_rebuilt_one():
    setup = _near_field("single")
    engine.KERNEL_CACHE.clear()
    cold = engine.compute(setup, use_cache=False)
    warm = engine.compute(setup, use_cache=False)  # the kernel comes from the cache
    assert cold.plan.variant == "band_limited"
    np.testing.assert_array_equal(warm.field, cold.field)


@pytest.mark.parametrize("method", ["angular_spectrum", "fresnel"])
def test_single_and_double_precision_agree(method):
    single = engine.compute(_near_field("single", method), use_cache=False)
    double = engine.compute(_near_field("double", method), use_cache=False)
    assert single.plan.dtype == "complex64"
    assert double.plan.dtype == "complex128"
    assert single.intensity.shape == double.intensity.shape
    assert _rel(single.intensity, double.intensity) < 1e-4


def test_result_cache_returns_identical_arrays_and_ignores_display_settings():
    cache = engine.ResultCache()
    setup = _near_field("single")
    first = engine.compute(setup, cache=cache)
    assert not first.cached
    again = engine.compute(setup, cache=cache)
    assert again.cached
    assert again.intensity is first.intensity
    setup.view = {"scale": "log", "colormap": "magma"}
    setup.meta = {"title": "same physics, new title"}
    shown = engine.compute(setup, cache=cache)
    assert shown.cached  # a display change recomputes nothing
    np.testing.assert_array_equal(shown.field, first.field)
    setup.screen.distance = 0.021
    moved = engine.compute(setup, cache=cache)
    assert not moved.cached
    assert len(cache) == 2


def test_result_cache_is_bounded_in_bytes():
    first = engine.compute(_near_field("single"), use_cache=False)
    cache = engine.ResultCache(max_bytes=int(first.nbytes * 2.5))
    for d in (0.02, 0.021, 0.022, 0.023):
        s = _near_field("single")
        s.screen.distance = d
        engine.compute(s, cache=cache)
    assert len(cache) == 2
    assert cache.nbytes <= cache.max_bytes


# --------------------------------------------------------------------------- benchmark


@pytest.mark.slow
def test_benchmark_emits_the_row_schema():
    out = io.StringIO()
    with redirect_stdout(out):
        code = cli.main(["bench", "--quick", "--json", "--tiny"])  # `fringebench bench`
    assert code == 0
    rows = json.loads(out.getvalue())
    assert isinstance(rows, list)
    for row in rows:
        assert set(benchmark.ROW_KEYS) <= set(row)
        assert row["ours_s"] > 0
    cases = {(r["case"], r["method"]) for r in rows}
    for m in benchmark.METHODS:
        assert ("propagation", m) in cases
    assert {
        "cached_repeat",
        "render_default_preset",
        "broadband_render",
        "camera_window",
        "peak_memory",
        "wide_angle_far_field",
    } <= {c for c, _ in cases}
    for r in rows:
        if r["case"] == "propagation":
            assert r["fft_pair_s"] > 0
            assert r["plain_numpy_s"] > 0
            assert r["ratio_to_fft_pair"] == pytest.approx(r["ours_s"] / r["fft_pair_s"])
            assert r["speedup_vs_plain_numpy"] == pytest.approx(r["plain_numpy_s"] / r["ours_s"])
            if r["method"] == "fresnel_transfer_function":
                assert r["max_rel_diff_vs_plain"] < 1e-5  # same numbers as the plain recipe
        if r["case"] == "camera_window":
            assert r["max_rel_diff"] < 1e-4  # both routes compute the same Fourier sum
        if r["case"] == "peak_memory":
            assert r["peak_bytes"] >= r["floor_bytes"]
        if r["case"] == "wide_angle_far_field":
            # The far field equals the direct Rayleigh–Sommerfeld sum of the same samples
            # beyond the Fraunhofer distance (Goodman, Introduction to Fourier Optics,
            # 3rd ed., §3.5 and §4.3), to well under 1 % of the peak.
            assert r["max_rel_diff_vs_direct"] < 0.01
            assert r["direct_sum_s"] > 0 and r["bare_fft_s"] > 0
        if r["case"] == "broadband_render":
            assert r["wavelengths"] == 16 and r["monochromatic_s"] > 0
            assert r["ratio_to_monochromatic"] == pytest.approx(r["ours_s"] / r["monochromatic_s"])
            # The broad-band screen is the spectrum's weighted sum of the monochromatic
            # ones at its wavelengths (incoherent superposition, Born & Wolf ch. 10).
            assert r["max_rel_diff"] < 1e-9
    text = benchmark.table(rows)
    assert text.count("\n") == len(rows) + 1
