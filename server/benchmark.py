"""``fringebench bench``: propagation speed against the FFT limit and the plain recipe.

Everything is measured in one run on this machine, because absolute times drift
from run to run. For each grid size and each FFT-based method the run times,
interleaved round by round so that a change of machine load hits all of them:

* ours: one propagation with the kernel cached, as the app runs it
  (:func:`compute.propagators.propagate_fft` on a padded temporary, in place);
* the FFT pair: a bare forward and inverse 2-D FFT of the same shape and
  precision on the fastest FFT here (scipy.fft and measured pyFFTW plans are both
  timed, the faster is kept);
* the plain recipe: numpy.fft in complex128 with the transfer function rebuilt
  on every call, as a hand-written script does it.

Then a cached repeat of a whole setup, the end-to-end render of the default
preset, a 16-wavelength broad-band render of it against 16 monochromatic renders
at the same wavelengths, a camera-sized window from a large aperture grid through the matrix
Fourier transform and through a zero-padded FFT at the same pitch, the
wide-angle far field of a 10-wavelength disc (the non-uniform FFT of the
Rayleigh–Sommerfeld far field against the direct Rayleigh–Sommerfeld sum at the
same pixels and against a bare FFT of the same aperture grid), and the peak
memory of a 4096² single-precision propagation (in a fresh process).

Times are medians over the repeats, in seconds.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
import scipy.fft

from compute import engine, model, planning, propagators, snapshot
from compute import fft as cfft

__all__ = ["GOALS", "ROW_KEYS", "main", "run"]

ROW_KEYS = (
    "case",
    "method",
    "n",
    "precision",
    "ours_s",
    "fft_pair_s",
    "plain_numpy_s",
    "ratio_to_fft_pair",
    "speedup_vs_plain_numpy",
)
GOALS = {
    "ratio_to_fft_pair_at_2048": 1.2,
    "speedup_vs_plain_numpy_at_2048": 6.0,
    "cached_repeat_s": 0.005,
    "broadband_ratio_to_monochromatic": 1.2,
    "peak_bytes_4096_single": int(1.5 * 2**30),
}
PRESET = Path(__file__).resolve().parents[1] / "presets" / "default.json"

# The bench of the propagation cases: a 632.8 nm beam through a disc, 4 µm pitch,
# 20 mm to the screen (the transfer function is well sampled there at 1024²).
WAVELENGTH = 632.8e-9
PITCH = 4e-6
DISTANCE = 0.02
METHODS = ("fresnel_transfer_function", "angular_spectrum")


# --------------------------------------------------------------------------- timing


def _interleaved(timers: dict[str, Callable[[], float]], repeats: int) -> dict[str, float]:
    """Median seconds of each timer, run in rotating order round by round.

    Each timer runs once untimed first (warm caches, lazy imports), then
    ``repeats`` times; a timer returns the seconds of its own timed part.
    """
    names = list(timers)
    for name in names:
        timers[name]()
    samples: dict[str, list[float]] = {name: [] for name in names}
    for r in range(repeats):
        k = r % len(names)
        for name in names[k:] + names[:k]:
            samples[name].append(timers[name]())
    return {name: float(np.median(v)) for name, v in samples.items()}


def _timed(fn: Callable[[], object], before: Callable[[], object] | None = None):
    def timer() -> float:
        if before is not None:
            before()
        t0 = time.perf_counter()
        fn()
        return time.perf_counter() - t0

    return timer


# --------------------------------------------------------------------------- propagation


def _disc_field(n: int, dtype) -> np.ndarray:
    """A lit disc of radius n/8 samples in the middle of an n × n zero-padded grid."""
    j, i = np.ogrid[:n, :n]
    r2 = (i - n / 2 + 0.5) ** 2 + (j - n / 2 + 0.5) ** 2
    return (r2 <= (n / 8) ** 2).astype(dtype)


def _kernel(method: str, n: int, dtype) -> np.ndarray:
    if method == "angular_spectrum":
        return propagators.angular_spectrum_kernel(
            (n, n), PITCH, PITCH, WAVELENGTH, DISTANCE, dtype=dtype
        )
    return propagators.fresnel_transfer_kernel(
        (n, n), PITCH, PITCH, WAVELENGTH, DISTANCE, dtype=dtype
    )


def plain_numpy(method: str, u: np.ndarray) -> np.ndarray:
    """The recipe a user writes by hand: numpy.fft, complex128, kernel rebuilt each call."""
    ny, nx = u.shape
    fx = np.fft.fftfreq(nx, PITCH)
    fy = np.fft.fftfreq(ny, PITCH)
    gx, gy = np.meshgrid(fx, fy)
    k = 2 * np.pi / WAVELENGTH
    if method == "angular_spectrum":
        arg = 1.0 / WAVELENGTH**2 - gx**2 - gy**2
        h = np.where(arg >= 0, np.exp(1j * k * DISTANCE * np.sqrt(np.abs(arg) * WAVELENGTH**2)), 0)
        lim_x = 1.0 / (WAVELENGTH * np.sqrt((2 * DISTANCE / (nx * PITCH)) ** 2 + 1))
        lim_y = 1.0 / (WAVELENGTH * np.sqrt((2 * DISTANCE / (ny * PITCH)) ** 2 + 1))
        h = h * (np.abs(gx) <= lim_x) * (np.abs(gy) <= lim_y)
    else:
        h = np.exp(1j * k * DISTANCE) * np.exp(
            -1j * np.pi * WAVELENGTH * DISTANCE * (gx**2 + gy**2)
        )
    return np.fft.ifft2(np.fft.fft2(u.astype(np.complex128)) * h)


def _fftw_pair(shape: tuple[int, int], dtype):
    """A bare in-place FFTW forward and inverse pair on its own aligned buffer."""
    import pyfftw

    buf = pyfftw.empty_aligned(shape, dtype=dtype)
    # One thread below the size where two pay off, as in compute.fft.
    threads = cfft.WORKERS if shape[0] * shape[1] >= cfft.THREADED_SIZE else 1
    kw = {"axes": (-2, -1), "flags": ("FFTW_MEASURE",), "threads": threads}
    fwd = pyfftw.FFTW(buf, buf, direction="FFTW_FORWARD", **kw)
    inv = pyfftw.FFTW(buf, buf, direction="FFTW_BACKWARD", **kw)
    return buf, fwd, inv


def _propagation_rows(n: int, precision: str, repeats: int) -> list[dict]:
    dtype = np.complex64 if precision == "single" else np.complex128
    u0 = _disc_field(n, dtype)
    u128 = u0.astype(np.complex128)
    kernels = {m: _kernel(m, n, dtype) for m in METHODS}  # the cached kernels
    backend = cfft.prepare((n, n), dtype)  # the app's steady state: plans made, backend chosen
    field = cfft.zeros((n, n), dtype)

    def refill() -> None:
        np.copyto(field, u0)

    # Ours and the FFT pair take tens of milliseconds: they alternate in tight
    # rounds of their own, so that a burst of load elsewhere hits both; the slow
    # plain recipe is timed in rounds of its own.
    timers: dict[str, Callable[[], float]] = {}
    slow: dict[str, Callable[[], float]] = {}
    for m in METHODS:
        timers[f"ours:{m}"] = _timed(
            lambda m=m: propagators.propagate_fft(field, kernels[m], overwrite=True), refill
        )
        slow[f"plain:{m}"] = _timed(lambda m=m: plain_numpy(m, u128))
    w = cfft.WORKERS
    sbuf = u0.copy()
    timers["pair:scipy"] = _timed(  # in place: the fastest way to call scipy.fft
        lambda: scipy.fft.ifft2(
            scipy.fft.fft2(sbuf, workers=w, overwrite_x=True), workers=w, overwrite_x=True
        ),
        lambda: np.copyto(sbuf, u0),
    )
    if "pyfftw" in cfft.BACKENDS:
        buf, fwd, inv = _fftw_pair((n, n), dtype)
        timers["pair:pyfftw"] = _timed(
            lambda: (fwd.execute(), inv.execute()), lambda: np.copyto(buf, u0)
        )
    med = _interleaved(timers, 3 * repeats)
    med.update(_interleaved(slow, repeats))
    pairs = {k.split(":")[1]: v for k, v in med.items() if k.startswith("pair:")}
    pair_backend = min(pairs, key=pairs.get)
    pair = pairs[pair_backend]
    rows = []
    for m in METHODS:
        refill()
        ours_out = np.array(propagators.propagate_fft(field, kernels[m], overwrite=True))
        ref = plain_numpy(m, u128)
        diff = float(np.max(np.abs(ours_out - ref)) / np.max(np.abs(ref)))
        ours, plain = med[f"ours:{m}"], med[f"plain:{m}"]
        rows.append(
            _row(
                "propagation",
                m,
                n,
                precision,
                ours,
                pair,
                plain,
                fft_backend=backend,
                pair_backend=pair_backend,
                pair_scipy_s=pairs.get("scipy"),
                pair_pyfftw_s=pairs.get("pyfftw"),
                max_rel_diff_vs_plain=diff,
                repeats=3 * repeats,
                plain_repeats=repeats,
            )
        )
    return rows


def _row(case, method, n, precision, ours, pair=None, plain=None, **extra) -> dict:
    row = {
        "case": case,
        "method": method,
        "n": int(n),
        "precision": precision,
        "ours_s": float(ours),
        "fft_pair_s": None if pair is None else float(pair),
        "plain_numpy_s": None if plain is None else float(plain),
        "ratio_to_fft_pair": None if pair is None else float(ours / pair),
        "speedup_vs_plain_numpy": None if plain is None else float(plain / ours),
    }
    row.update(extra)
    return row


# --------------------------------------------------------------------------- whole setups


def _setup_rows(repeats: int) -> list[dict]:
    setup = snapshot.load(PRESET)
    cache = engine.ResultCache()
    first = engine.compute(setup, cache=cache)
    p = first.plan
    n = max(p.padded) if p.padded else 0

    def render() -> None:
        engine.KERNEL_CACHE.clear()
        engine.compute(setup, use_cache=False)

    med = _interleaved(
        {
            "cached": _timed(lambda: engine.compute(setup, cache=cache)),
            "render": _timed(render),
        },
        max(repeats, 5),
    )
    precision = "single" if p.dtype == "complex64" else "double"
    common = {"variant": p.variant, "grid": [int(v) for v in p.padded], "preset": PRESET.stem}
    return [
        _row("cached_repeat", p.method, n, precision, med["cached"], **common),
        _row("render_default_preset", p.method, n, precision, med["render"], **common),
    ]


def _broadband_rows(repeats: int, count: int = 16) -> list[dict]:
    """The default preset with a ``count``-wavelength Gaussian spectrum against ``count``
    monochromatic renders at the same wavelengths, kernels built afresh in both.

    A render takes some 80 ms here, so the rounds are many: with five, the ratio
    moved by ±15 % between runs on a quiet machine. ``max_rel_diff`` compares the
    broad-band screen with the spectrum's weighted sum of the monochromatic ones:
    both sides compute the same thing.
    """
    from compute import spectrum

    base = snapshot.load(PRESET)
    broad = snapshot.from_dict(snapshot.to_dict(base))
    broad.source.spectrum = "gaussian"
    broad.source.bandwidth = 0.04 * base.source.wavelength  # a broad LED-like line
    broad.source.spectral_samples = count
    spec = spectrum.sample("gaussian", base.source.wavelength, broad.source.bandwidth, count=count)
    lines = spec.wavelengths
    monos = []
    for lam in lines:
        m = snapshot.from_dict(snapshot.to_dict(base))
        m.source.wavelength = float(lam)
        monos.append(m)

    def broadband() -> None:
        engine.KERNEL_CACHE.clear()
        engine.compute(broad, use_cache=False)

    def monochromatic() -> None:
        engine.KERNEL_CACHE.clear()
        for m in monos:
            engine.compute(m, use_cache=False)

    med = _interleaved({"broad": _timed(broadband), "mono": _timed(monochromatic)}, max(repeats, 3))
    plan = engine.check(broad)
    precision = "single" if plan.dtype == "complex64" else "double"
    n = max(plan.padded) if plan.padded else 0
    summed = sum(
        w * engine.compute(m, use_cache=False).intensity
        for w, m in zip(spec.weights, monos, strict=True)
    )
    got = engine.compute(broad, use_cache=False).intensity
    diff = float(np.max(np.abs(got - summed)) / np.max(summed))
    common = {"wavelengths": count, "preset": PRESET.stem, "max_rel_diff": diff}
    return [
        _row(
            "broadband_render",
            plan.method,
            n,
            precision,
            med["broad"],
            monochromatic_s=med["mono"],
            ratio_to_monochromatic=med["broad"] / med["mono"],
            **common,
        )
    ]


def _camera_rows(n: int, window: int, pad: int, repeats: int) -> list[dict]:
    """A window × window camera from an n² aperture grid, at 1/pad of the FFT pitch.

    Both routes compute the same Fourier sum at the same frequencies: the matrix
    Fourier transform directly, the FFT route by zero-padding to (pad·n)² and
    cropping the window.
    """
    dtype = np.complex64
    u = _disc_field(n, dtype)
    x = np.arange(n) * PITCH
    big = cfft.next_fast_len(pad * n)
    k = np.arange(window) - window // 2
    f = k / (big * PITCH)

    def mft() -> np.ndarray:
        return propagators.matrix_dft(u, x, x, f, f, pitch=(PITCH, PITCH))

    def padded_fft() -> np.ndarray:
        full = cfft.zeros((big, big), dtype)
        full[:n, :n] = u
        spec = cfft.fft2(full, overwrite=True)
        idx = k % big
        out = spec[np.ix_(idx, idx)]
        out *= PITCH * PITCH
        return out

    a, b = mft(), padded_fft()
    diff = float(np.max(np.abs(a - b)) / np.max(np.abs(b)))
    med = _interleaved({"mft": _timed(mft), "fft": _timed(padded_fft)}, repeats)
    common = {"window": [window, window], "padded_fft": [big, big], "max_rel_diff": diff}
    return [
        _row("camera_window", "matrix_fourier", n, "single", med["mft"], **common),
        _row("camera_window", "padded_fft", n, "single", med["fft"], **common),
    ]


# --------------------------------------------------------------------------- wide angles


def _wide_angle_rows(pixels: int, repeats: int) -> list[dict]:
    """The far field of a 10 λ disc at 1000 λ on a pixels² window whose corners see 59°.

    Ours: the non-uniform FFT of the Rayleigh–Sommerfeld far field
    (:func:`compute.propagators.rayleigh_sommerfeld_far_field`) on the grid `auto`
    plans; against it the direct Rayleigh–Sommerfeld sum over the same samples at the
    same pixels, and a bare FFT of the same aperture grid (which gives the pattern
    only on its own uniform frequency grid, not at the pixels' directions).
    """
    lam = WAVELENGTH
    z = 1000 * lam
    half = z * np.tan(np.radians(59.0)) / np.sqrt(2.0)
    setup = model.Setup(
        source=model.Source(wavelength=lam),
        aperture=model.Aperture(elements=[model.Circle(diameter=10 * lam)]),
        screen=model.Screen(distance=z, width=2 * half, height=2 * half, samples=pixels),
        numerics=model.Numerics(method="auto", precision="double"),
    )
    p = planning.plan(setup)
    xs, ys = planning.screen_axes(setup)
    x = p.grid_centre[0] - 0.5 * p.nx * p.dx + (np.arange(p.nx) + 0.5) * p.dx
    y = p.grid_centre[1] - 0.5 * p.ny * p.dy + (np.arange(p.ny) + 0.5) * p.dy
    xx, yy = np.meshgrid(x, y)
    u = ((xx**2 + yy**2) <= (5 * lam) ** 2).astype(np.complex128)

    def ours() -> np.ndarray:
        return propagators.rayleigh_sommerfeld_far_field(u, x, y, lam, z, xs, ys)

    def direct() -> np.ndarray:
        return propagators.rayleigh_sommerfeld(u, x, y, lam, z, xs[None, :], ys[:, None])

    def bare() -> np.ndarray:
        return cfft.fft2(u)

    a, b = ours(), direct()
    diff = float(np.max(np.abs(np.abs(a) ** 2 - np.abs(b) ** 2)) / np.max(np.abs(b) ** 2))
    med = _interleaved(
        {"ours": _timed(ours), "direct": _timed(direct), "fft": _timed(bare)}, repeats
    )
    return [
        _row(
            "wide_angle_far_field",
            f"{p.method}/{p.variant}",
            pixels,
            "double",
            med["ours"],
            direct_sum_s=med["direct"],
            bare_fft_s=med["fft"],
            aperture_grid=[int(p.ny), int(p.nx)],
            speedup_vs_direct_sum=med["direct"] / med["ours"],
            ratio_to_bare_fft=med["ours"] / med["fft"],
            max_rel_diff_vs_direct=diff,
        )
    ]


# --------------------------------------------------------------------------- memory


def _high_water_bytes() -> int:
    """Peak resident memory of this process's own address space, bytes.

    VmHWM starts afresh at exec; ru_maxrss would carry the parent's peak over.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def _peak_child(n: int) -> None:
    """Run in a fresh process: one single-precision angular-spectrum propagation at n².

    Builds the kernel, pads the field, propagates in place and reads the window
    out, as the app does on its first computation of a setup. Prints the peak
    resident memory before and after as JSON.
    """
    base = _high_water_bytes()
    dtype = np.complex64
    kern = _kernel("angular_spectrum", n, dtype)
    field = cfft.zeros((n, n), dtype)
    q = n // 4
    field[q : n - q, q : n - q] = _disc_field(n - 2 * q, dtype)
    out = propagators.propagate_fft(field, kern, overwrite=True)
    window = np.array(out[q : n - q, q : n - q])
    peak = _high_water_bytes()
    print(
        json.dumps(
            {
                "baseline_bytes": base,
                "peak_bytes": peak,
                "floor_bytes": int(field.nbytes + kern.nbytes + window.nbytes),
                "backend": cfft.backend_for((n, n), dtype),
            }
        )
    )


def _memory_row(n: int) -> dict:
    root = Path(__file__).resolve().parents[1]
    code = f"from server.benchmark import _peak_child; _peak_child({int(n)})"
    t0 = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=True,
        cwd=root,
        env={**os.environ, "PYTHONPATH": str(root)},
    )
    elapsed = time.perf_counter() - t0
    info = json.loads(done.stdout.strip().splitlines()[-1])
    return _row(
        "peak_memory",
        "angular_spectrum",
        n,
        "single",
        elapsed,
        peak_bytes=info["peak_bytes"],
        working_bytes=info["peak_bytes"] - info["baseline_bytes"],
        floor_bytes=info["floor_bytes"],
        fft_backend=info["backend"],
        note="ours_s is the whole child process, imports and kernel build included",
    )


# --------------------------------------------------------------------------- the run


def run(quick: bool = False, tiny: bool = False, log=None) -> list[dict]:
    """Measure everything; return the rows (see :data:`ROW_KEYS` for the common keys)."""
    say = log or (lambda text: None)
    if tiny:
        sizes, precisions, reps = [256], ["single"], {256: 3}
        camera, memory_n = (256, 64, 4), 512
    elif quick:
        sizes, precisions, reps = [1024, 2048], ["single"], {1024: 7, 2048: 7}
        camera, memory_n = (2048, 512, 4), 4096
    else:
        sizes, precisions = [1024, 2048, 4096], ["single", "double"]
        reps = {1024: 15, 2048: 9, 4096: 5}
        camera, memory_n = (2048, 512, 4), 4096
    rows: list[dict] = []
    for n in sizes:
        for prec in precisions:
            say(f"propagation {n}² {prec} ...")
            rows += _propagation_rows(n, prec, reps[n])
    say("cached repeat and default preset ...")
    rows += _setup_rows(20 if not tiny else 5)
    say("16-wavelength broad-band render against 16 monochromatic ones ...")
    rows += _broadband_rows(15 if not tiny else 3)
    say(f"camera window {camera[1]}² from a {camera[0]}² grid ...")
    rows += _camera_rows(*camera, repeats=3 if not tiny else 2)
    wide = 32 if tiny else 128
    say(f"wide-angle far field on {wide}² pixels against the direct sum ...")
    rows += _wide_angle_rows(wide, 2 if tiny else 3)
    say(f"peak memory at {memory_n}² ...")
    rows.append(_memory_row(memory_n))
    return rows


def goals(rows: list[dict]) -> list[tuple[str, bool]]:
    """The goals of the benchmark and whether this run met them."""
    out: list[tuple[str, bool]] = []
    for r in rows:
        if r["case"] == "propagation" and r["n"] == 2048 and r["precision"] == "single":
            g = GOALS["ratio_to_fft_pair_at_2048"]
            out.append(
                (f"{r['method']} 2048² within {g}× of the FFT pair", r["ratio_to_fft_pair"] <= g)
            )
            g = GOALS["speedup_vs_plain_numpy_at_2048"]
            out.append(
                (
                    f"{r['method']} 2048² at least {g}× faster than plain numpy",
                    r["speedup_vs_plain_numpy"] >= g,
                )
            )
        elif r["case"] == "cached_repeat":
            out.append(("cached repeat in 5 ms or less", r["ours_s"] <= GOALS["cached_repeat_s"]))
        elif r["case"] == "peak_memory" and r["n"] == 4096:
            out.append(
                (
                    "4096² single within 1.5 GiB peak",
                    r["peak_bytes"] <= GOALS["peak_bytes_4096_single"],
                )
            )
        elif r["case"] == "broadband_render":
            g = GOALS["broadband_ratio_to_monochromatic"]
            out.append(
                (
                    f"{r['wavelengths']}-wavelength render within {g}× of as many "
                    "monochromatic ones",
                    r["ratio_to_monochromatic"] <= g,
                )
            )
    cam = {r["method"]: r["ours_s"] for r in rows if r["case"] == "camera_window"}
    if len(cam) == 2:
        out.append(
            ("matrix Fourier faster than padded FFT", cam["matrix_fourier"] < cam["padded_fft"])
        )
    return out


def _ms(v: float | None) -> str:
    return "—" if v is None else f"{v * 1e3:.1f}"


def _x(v: float | None) -> str:
    return "—" if v is None else f"{v:.2f}×"


def table(rows: list[dict]) -> str:
    """The rows as a markdown table (times in ms)."""
    lines = [
        "| case | method | N | precision | ours ms | FFT pair ms | plain numpy ms "
        "| ours / pair | speed-up vs plain |",
        "| --- | --- | ---: | --- | ---: | ---: | ---: | ---: | ---: |",
    ]
    for r in rows:
        if r["case"] == "peak_memory":
            ours = f"peak {r['peak_bytes'] / 2**20:.0f} MiB (+{r['working_bytes'] / 2**20:.0f})"
        elif r["case"] == "wide_angle_far_field":
            ours = (
                f"{_ms(r['ours_s'])} vs direct sum {_ms(r['direct_sum_s'])} "
                f"({r['speedup_vs_direct_sum']:.0f}× faster), bare FFT of the "
                f"{r['aperture_grid'][0]}² grid {_ms(r['bare_fft_s'])}"
            )
        elif r["case"] == "broadband_render":
            ours = (
                f"{_ms(r['ours_s'])} vs {r['wavelengths']} monochromatic "
                f"{_ms(r['monochromatic_s'])} ({_x(r['ratio_to_monochromatic'])})"
            )
        else:
            ours = _ms(r["ours_s"])
        lines.append(
            f"| {r['case']} | {r['method']} | {r['n']} | {r['precision']} | {ours} "
            f"| {_ms(r['fft_pair_s'])} | {_ms(r['plain_numpy_s'])} "
            f"| {_x(r['ratio_to_fft_pair'])} | {_x(r['speedup_vs_plain_numpy'])} |"
        )
    return "\n".join(lines)


def _machine() -> str:
    blas = {k: os.environ[k] for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE") if k in os.environ}
    return (
        f"{platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
        f"numpy {np.__version__}, scipy {scipy.__version__}, "
        f"FFT backends {', '.join(cfft.BACKENDS)}" + (f", {blas}" if blas else "")
    )


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="fringebench bench",
        description="Propagation speed against a bare FFT pair and the plain numpy recipe.",
    )
    add_arguments(p)
    return p


def add_arguments(p: argparse.ArgumentParser) -> None:
    """The options of ``bench``, for the command line's subparser."""
    p.add_argument("--json", action="store_true", help="print the rows as a JSON list")
    p.add_argument("--quick", action="store_true", help="N = 1024 and 2048, single precision")
    p.add_argument("--tiny", action="store_true", help=argparse.SUPPRESS)  # N = 256, for tests


def run_from_args(args: argparse.Namespace) -> int:
    """Run with parsed options; print a table (or JSON); return the exit code."""
    log = None if args.json else (lambda text: print(text, file=sys.stderr, flush=True))
    t0 = time.perf_counter()
    rows = run(quick=args.quick, tiny=args.tiny, log=log)
    if args.json:
        print(json.dumps(rows, indent=1, allow_nan=False))
        return 0
    print(f"fringebench bench{' --quick' if args.quick else ''} on {_machine()}")
    print(f"({time.perf_counter() - t0:.0f} s; medians; times in ms)\n")
    print(table(rows))
    print()
    for text, ok in goals(rows):
        print(f"{'met ' if ok else 'MISS'}  {text}")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point: ``python -m server.benchmark [--json] [--quick]``."""
    return run_from_args(build_parser().parse_args(argv))


if __name__ == "__main__":
    sys.exit(main())
