"""The FFT backend: one place that decides how 2-D transforms run on this machine.

Two backends do the same transforms: FFTW through pyFFTW, when it is installed,
and scipy.fft (pocketfft) otherwise; both use every core for large grids. FFTW
needs planning per shape, precision and direction. Measured on the project's
2-core machine, ``FFTW_ESTIMATE`` plans run 4–10× slower than ``FFTW_MEASURE``
ones at the sizes the app uses, while measuring takes from a fraction of a
second to many seconds at 2048². So the policy is:

* a shape that FFTW has not measured runs on scipy.fft, which needs no plan;
* a long-running process that asked for it (:func:`auto_plan`, the server) has
  a shape and precision that come back (a slider being dragged) measured on a
  background thread; then the two backends are timed on that shape and the
  faster is kept for it;
* :func:`prepare` does the same at once, for benchmarks;
* from then on every forward transform of that shape is timed, one in
  :data:`EXPLORE_EVERY` runs on the other backend, and the backend with the
  lower moving average is used: the choice follows the load of the machine.

A one-shot command or a test run never pays for planning, and its numbers do
not depend on what was planned before.

What FFTW measures it keeps as wisdom; a plan for an array is then made from
the wisdom alone (``FFTW_WISDOM_ONLY``, a fraction of a millisecond, the data
untouched), so no plan holds on to an array or a scratch buffer. Transforms are
in place; the inverse is normalised by 1/N as scipy's is, and
:func:`multiply_ifft2` folds the 1/N into the transfer-function product.
"""

from __future__ import annotations

import contextlib
import math
import os
import queue
import threading
import time
from collections.abc import Iterator

import numpy as np
import scipy.fft

try:  # optional: the fastest backend where it is installed
    import pyfftw
except ImportError:  # pragma: no cover - depends on the installation
    pyfftw = None

__all__ = [
    "BACKENDS",
    "WORKERS",
    "auto_plan",
    "backend_for",
    "fft2",
    "ifft2",
    "multiply_ifft2",
    "next_fast_len",
    "one_thread",
    "prepare",
    "use_backend",
    "zeros",
]

WORKERS = max(1, os.cpu_count() or 1)
BACKENDS: tuple[str, ...] = ("pyfftw", "scipy") if pyfftw is not None else ("scipy",)

PLAN_AFTER_USES = 2  # measure a shape in the background at its second use
PLAN_MIN_SIZE = 128 * 128  # smaller transforms are fast enough on scipy.fft
# Below this size one thread beats two that must meet after every pass, and
# measuring with two threads on a busy machine takes a hundred times longer.
THREADED_SIZE = 512 * 512

EXPLORE_EVERY = 8  # one forward transform in this many runs on the other backend
SMOOTHING = 0.25  # weight of the newest time in the moving average

# FRINGEBENCH_FFT=scipy (or pyfftw) pins the backend for a whole process.
_pinned = os.environ.get("FRINGEBENCH_FFT", "")
_forced: str | None = _pinned if _pinned in BACKENDS else None
_auto = False
_lock = threading.Lock()
_uses: dict[tuple, int] = {}
_choice: dict[tuple, str] = {}
_speed: dict[tuple, dict[str, float]] = {}  # moving average of a forward transform, s
_calls: dict[tuple, int] = {}
_queued: set[tuple] = set()
_jobs: queue.Queue[tuple] = queue.Queue()
_planner: threading.Thread | None = None


def next_fast_len(n: int) -> int:
    """Smallest length ≥ n that the FFT handles fast (a product of small primes)."""
    return int(scipy.fft.next_fast_len(int(n), real=False))


def zeros(shape: tuple[int, ...], dtype=np.complex64) -> np.ndarray:
    """A zeroed array aligned for SIMD, so that the FFT can work on it in place."""
    if pyfftw is not None:
        return pyfftw.zeros_aligned(shape, dtype=dtype)
    return np.zeros(shape, dtype=dtype)


# --------------------------------------------------------------------------- FFTW


_LOCAL = threading.local()


@contextlib.contextmanager
def one_thread() -> Iterator[None]:
    """Within the block, this thread's transforms run on one core (scipy.fft, one worker).

    A shared server runs heavy jobs so, leaving the other cores to interactive
    updates; the backends' speed records are not touched by these runs.
    """
    old = getattr(_LOCAL, "one", False)
    _LOCAL.one = True
    try:
        yield
    finally:
        _LOCAL.one = old


def _one() -> bool:
    return getattr(_LOCAL, "one", False)


def _key(shape: tuple[int, ...], dtype) -> tuple:
    return (tuple(int(s) for s in shape), np.dtype(dtype).str)


def _threads(shape: tuple[int, ...]) -> int:
    return WORKERS if shape[-1] * shape[-2] >= THREADED_SIZE else 1


def _direction(forward: bool) -> str:
    return "FFTW_FORWARD" if forward else "FFTW_BACKWARD"


def _learn(shape: tuple[int, ...], dtype) -> None:
    """Measure in-place plans of both directions on a scratch array; FFTW keeps the wisdom."""
    buf = pyfftw.empty_aligned(shape, dtype=dtype)
    for forward in (True, False):
        pyfftw.FFTW(
            buf,
            buf,
            axes=(-2, -1),
            direction=_direction(forward),
            flags=("FFTW_MEASURE",),
            threads=_threads(shape),
        )  # no time limit: a plan cut short leaves no wisdom behind


def _plan(a: np.ndarray, forward: bool):
    """An in-place plan on ``a`` from wisdom alone, or None (no wisdom, or a layout FFTW
    did not measure). Making it never touches the data."""
    try:
        return pyfftw.FFTW(
            a,
            a,
            axes=(-2, -1),
            direction=_direction(forward),
            flags=("FFTW_MEASURE", "FFTW_WISDOM_ONLY"),
            threads=_threads(a.shape),
        )
    except (RuntimeError, ValueError):
        return None


def _fftw_in_place(a: np.ndarray, forward: bool, overwrite: bool) -> np.ndarray | None:
    """Transform with FFTW in ``a`` (with ``overwrite``) or in an aligned copy; None when
    FFTW has no plan for it even after measuring."""
    if overwrite and a.flags.c_contiguous and a.flags.writeable:
        plan = _plan(a, forward)
        if plan is not None:
            plan.execute()
            return a
    out = pyfftw.empty_aligned(a.shape, dtype=a.dtype)
    np.copyto(out, a)
    plan = _plan(out, forward)
    if plan is None:  # pinned to FFTW before this shape was measured
        _learn(a.shape, a.dtype)
        plan = _plan(out, forward)
        if plan is None:
            return None
    plan.execute()
    return out


def _seconds(run, a: np.ndarray) -> float:
    t0 = time.perf_counter()
    run(a)
    return time.perf_counter() - t0


def _measure(key: tuple) -> None:
    """Measure FFTW plans for ``key``, time both backends on it and keep the faster."""
    shape, dtype = key[0], np.dtype(key[1])
    _learn(shape, dtype)
    a = pyfftw.empty_aligned(shape, dtype=dtype)
    a[...] = 1.0
    fwd, inv = _plan(a, True), _plan(a, False)

    def fftw(_):
        fwd.execute()
        inv.execute()

    def pocketfft(b):  # in place too, as a propagation runs it
        f = scipy.fft.fft2(b, workers=WORKERS, overwrite_x=True)
        scipy.fft.ifft2(f, workers=WORKERS, overwrite_x=True)

    t_fftw = t_scipy = float("inf")
    if fwd is not None and inv is not None:
        # Interleaved, median of five each: a change of machine load hits both
        # alike, and threads that wait on a busy machine count as they would in use.
        fftw(a)
        pocketfft(a)
        runs = [(_seconds(fftw, a), _seconds(pocketfft, a)) for _ in range(5)]
        t_fftw = float(np.median([r[0] for r in runs]))
        t_scipy = float(np.median([r[1] for r in runs]))
    with _lock:
        _choice[key] = "pyfftw" if t_fftw <= t_scipy else "scipy"
        if math.isfinite(t_fftw):
            _speed[key] = {"pyfftw": 0.5 * t_fftw, "scipy": 0.5 * t_scipy}
        _queued.discard(key)


def _planner_loop() -> None:
    while True:
        key = _jobs.get()
        try:
            _measure(key)
        except Exception:  # a shape FFTW cannot plan stays on scipy.fft
            with _lock:
                _choice[key] = "scipy"
                _queued.discard(key)
        finally:
            _jobs.task_done()


def _queue_plan(key: tuple) -> None:
    global _planner
    _queued.add(key)
    _jobs.put(key)
    if _planner is None or not _planner.is_alive():
        _planner = threading.Thread(target=_planner_loop, name="fftw-planner", daemon=True)
        _planner.start()


def backend_for(shape: tuple[int, ...], dtype, *, count: bool = False) -> str:
    """The backend that transforms arrays of ``shape`` and ``dtype`` now.

    With ``count``, this use counts towards measuring the shape with FFTW.
    """
    dt = np.dtype(dtype)
    if pyfftw is None or len(shape) != 2 or dt not in (np.complex64, np.complex128):
        return "scipy"
    if _forced is not None:
        return _forced
    key = _key(shape, dt)
    with _lock:
        choice = _choice.get(key)
        if choice is not None:
            return choice
        big = shape[0] * shape[1] >= PLAN_MIN_SIZE
        if count and _auto and big and key not in _queued:
            _uses[key] = _uses.get(key, 0) + 1
            if _uses[key] >= PLAN_AFTER_USES:
                _queue_plan(key)
    return "scipy"


def _next_backend(key: tuple, default: str) -> str:
    """The backend for this forward transform: the faster so far, now and then the other."""
    with _lock:
        if _forced is not None or key not in _speed:
            return default
        n = _calls[key] = _calls.get(key, 0) + 1
    if n % EXPLORE_EVERY == 0:
        return "scipy" if default == "pyfftw" else "pyfftw"
    return default


def _record(key: tuple, backend: str, seconds: float) -> None:
    """Fold the time of one forward transform into its backend's moving average."""
    with _lock:
        speed = _speed.get(key)
        if speed is None or _forced is not None:
            return
        speed[backend] += SMOOTHING * (seconds - speed[backend])
        _choice[key] = min(speed, key=speed.__getitem__)


def auto_plan(enabled: bool = True) -> None:
    """Measure recurring shapes with FFTW in the background (for long-running processes)."""
    global _auto
    _auto = bool(enabled) and pyfftw is not None


def prepare(shape: tuple[int, int], dtype=np.complex64) -> str:
    """Measure ``shape`` and ``dtype`` now (blocking); return the backend chosen for it."""
    dt = np.dtype(dtype)
    if pyfftw is None or dt not in (np.complex64, np.complex128):
        return "scipy"
    key = _key(shape, dt)
    with _lock:
        ready = key in _choice
    if not ready:
        _measure(key)
    return _choice[key]


@contextlib.contextmanager
def use_backend(name: str | None) -> Iterator[None]:
    """Run every transform on ``name`` ("pyfftw" or "scipy") inside the block.

    Process-wide, for tests and benchmarks; ``None`` restores the automatic choice.
    """
    global _forced
    if name is not None and name not in BACKENDS:
        raise ValueError(f"FFT backend {name!r} is not available here (have {BACKENDS})")
    old = _forced
    _forced = name
    try:
        yield
    finally:
        _forced = old


# --------------------------------------------------------------------------- transforms


def _complex(a: np.ndarray) -> np.ndarray:
    if a.dtype in (np.complex64, np.complex128):
        return a
    return a.astype(np.complex64 if a.dtype == np.float32 else np.complex128)


def _scale(a: np.ndarray, s: float) -> None:
    """a *= s in place, as a real multiply over the interleaved parts."""
    if a.flags.c_contiguous:
        r = a.view(a.real.dtype)
        np.multiply(r, r.dtype.type(s), out=r)
    else:
        a *= s


def fft2(a: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
    """Forward 2-D FFT over the last two axes, in the precision of ``a``.

    With ``overwrite`` the result may be ``a`` itself, transformed in place.
    """
    a = _complex(np.asarray(a))
    if _one():
        return scipy.fft.fft2(a, workers=1, overwrite_x=overwrite)
    key = _key(a.shape, a.dtype)
    backend = _next_backend(key, backend_for(a.shape, a.dtype, count=True))
    t0 = time.perf_counter()
    out = _fftw_in_place(a, True, overwrite) if backend == "pyfftw" else None
    if out is None:
        backend = "scipy"
        out = scipy.fft.fft2(a, workers=WORKERS, overwrite_x=overwrite)
    _record(key, backend, time.perf_counter() - t0)
    return out


def ifft2(a: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
    """Inverse 2-D FFT over the last two axes (normalised by 1/N), in the precision of ``a``.

    With ``overwrite`` the result may be ``a`` itself, transformed in place.
    """
    a = _complex(np.asarray(a))
    if _one():
        return scipy.fft.ifft2(a, workers=1, overwrite_x=overwrite)
    if backend_for(a.shape, a.dtype) == "pyfftw":
        out = _fftw_in_place(a, False, overwrite)
        if out is not None:
            _scale(out, 1.0 / (a.shape[-1] * a.shape[-2]))
            return out
    return scipy.fft.ifft2(a, workers=WORKERS, overwrite_x=overwrite)


def multiply_ifft2(spec: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """``ifft2(spec · kernel)``, in place in ``spec`` where the backend allows.

    ``spec`` is overwritten and the result returned (``spec`` itself on the
    in-place paths); ``kernel`` broadcasts against it and is not modified.
    """
    if spec.dtype not in (np.complex64, np.complex128) or not spec.flags.writeable:
        raise ValueError("multiply_ifft2 needs a writeable complex64 or complex128 spectrum")
    if not _one() and backend_for(spec.shape, spec.dtype) == "pyfftw" and spec.flags.c_contiguous:
        plan = _plan(spec, False)
        if plan is not None:
            # FFTW does not normalise: the 1/N is applied to each block of the
            # product while it is still in the cache.
            n = spec.shape[-1] * spec.shape[-2]
            _times_scaled(spec, kernel, 1.0 / n)
            plan.execute()
            return spec
    np.multiply(spec, kernel, out=spec)
    return ifft2(spec, overwrite=True)


_BLOCK_BYTES = 256 * 1024  # a block of the kernel product: well inside an L2 cache
_CACHED_BYTES = 8 * 1024**2  # a spectrum this small stays in the L3 cache between passes


def _times_scaled(spec: np.ndarray, kernel: np.ndarray, s: float) -> None:
    """spec *= kernel · s in place, by blocks of rows so the second pass hits the cache."""
    if spec.nbytes <= _CACHED_BYTES:
        np.multiply(spec, kernel, out=spec)
        _scale(spec, s)
        return
    s2 = spec.reshape(-1, spec.shape[-1])
    k2 = np.broadcast_to(kernel, spec.shape).reshape(s2.shape)
    step = max(1, _BLOCK_BYTES // max(1, s2.strides[0]))
    for i in range(0, s2.shape[0], step):
        blk = s2[i : i + step]
        np.multiply(blk, k2[i : i + step], out=blk)
        _scale(blk, s)
