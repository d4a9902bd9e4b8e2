"""Sweeps: one setup computed over a grid of values of one or more of its settings.

A sweep varies settings named by their snapshot path (``screen.distance``,
``aperture.elements[0].width``, ``aperture.elements[2].vertices[1][0]``) over
linear or logarithmic ranges. Every point of the grid is an independent
snapshot: the base setup's JSON form (:func:`compute.snapshot.to_dict`) with the
varied values written in, read back with :func:`compute.snapshot.from_dict`, so
every snapshot path works and a bad value gets the snapshot reader's own message.
Each point is computed with ``use_cache=False`` in the snapshot's own precision,
and the numbers read off it become one row.

The rows are identical whichever way the sweep runs (in this process, on a local
Dask cluster, or on an existing Dask scheduler), provided that the workers run
the same software on the same kind of machine: every point is computed by the
same function from the same document, with the BLAS held to one thread (the
rounding of a multi-threaded matrix product depends on the thread count), and
the rows are put in grid order, the first varied setting outermost. Dask
(``distributed``) is imported only when workers or a scheduler are asked for.

Row columns, SI units: the varied paths, then :data:`METRIC_COLUMNS` —
``fresnel_number``; ``method`` and ``variant`` as planned (what ``auto`` chose);
``validity`` (the worst verdict of the validity report); ``peak_irradiance``
(W/m²) at ``peak_x``, ``peak_y`` (m); ``window_power`` (W on the screen window);
``d4sigma_x``, ``d4sigma_y``, ``central_lobe_x``, ``central_lobe_y``, ``fwhm_x``,
``fwhm_y`` (m); ``visibility`` (of the horizontal cut through the peak); and
``error``, the message of a point that could not be computed (its metrics are
None), else None.
"""

from __future__ import annotations

import contextlib
import copy
import ctypes
import itertools
import math
import re
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from . import engine, metrics, snapshot
from . import fft as _fft
from .errors import SetupError
from .snapshot import PHYSICS_SECTIONS, SnapshotError

__all__ = [
    "MAX_POINTS",
    "METRIC_COLUMNS",
    "Cancelled",
    "SweepError",
    "SweepPlan",
    "SweepProgress",
    "Vary",
    "compute_point",
    "parse_vary",
    "plan_sweep",
    "run_plan",
    "run_sweep",
]

#: Largest number of points of one sweep (all axes together).
MAX_POINTS = 10_000
#: Largest number of points along one axis.
MAX_COUNT = 10_000
#: Seconds to wait for an existing scheduler to answer and to have a worker.
CONNECT_TIMEOUT_S = 10.0
#: Seconds between two looks at the cancel flag while Dask workers compute.
POLL_S = 0.05

METRIC_COLUMNS: tuple[str, ...] = (
    "fresnel_number",
    "method",
    "variant",
    "validity",
    "peak_irradiance",
    "peak_x",
    "peak_y",
    "window_power",
    "d4sigma_x",
    "d4sigma_y",
    "central_lobe_x",
    "central_lobe_y",
    "fwhm_x",
    "fwhm_y",
    "visibility",
    "error",
)


class SweepError(ValueError):
    """A sweep that cannot run as asked; ``what`` names the culprit.

    Parameters
    ----------
    what
        The varied path (``screen.distance``; several, comma-separated, for a
        combination), the text of a spec that could not be read, ``"vary"`` for the
        sweep as a whole, or ``"scheduler"`` / ``"workers"`` for the executor.
    message
        One plain sentence: what is wrong and what to change.
    """

    def __init__(self, what: str, message: str):
        self.what = what
        self.message = message
        super().__init__(f"{what}: {message}")


class Cancelled(Exception):
    """The caller's ``cancel`` asked to stop; ``rows`` holds the points finished by then.

    ``rows`` is ``[(index, row), ...]`` in grid order (with gaps where points were
    not finished).
    """

    def __init__(self, rows: list[tuple[int, dict[str, Any]]] | None = None):
        self.rows = list(rows or [])
        super().__init__(f"cancelled after {len(self.rows)} points")


@dataclass(frozen=True)
class Vary:
    """One varied setting: ``count`` values from ``start`` to ``stop``, both included.

    Linear spacing, or geometric spacing when ``log`` is true. A setting with whole
    numbers (``screen.samples``) takes the values rounded to the nearest integer.
    """

    path: str
    start: float
    stop: float
    count: int
    log: bool = False

    def __post_init__(self) -> None:
        _check_path_syntax(self.path)
        _check_range(self)

    @property
    def spec(self) -> str:
        """The command-line form, ``PATH=START:STOP:COUNT[:log]``."""
        tail = ":log" if self.log else ""
        return f"{self.path}={self.start!r}:{self.stop!r}:{self.count}{tail}"

    def values(self, integer: bool = False) -> list[float] | list[int]:
        """The values of the axis in order, as Python numbers.

        Raises
        ------
        SweepError
            When whole-number rounding makes two values equal.
        """
        space = np.geomspace if self.log else np.linspace
        vals = space(self.start, self.stop, self.count)
        if not integer:
            return [float(v) for v in vals]
        ints = [round(float(v)) for v in vals]
        if len(set(ints)) < len(ints):
            distinct = math.floor(self.stop) - math.ceil(self.start) + 1
            raise SweepError(
                self.path,
                f"{self.path} takes whole numbers; {self.count} points between "
                f"{self.start:g} and {self.stop:g} repeat some of them"
                + (f" (there are {distinct} whole numbers in the range)" if not self.log else "")
                + "; use fewer points or a wider range",
            )
        return ints


@dataclass
class SweepPlan:
    """A checked sweep: its axes, the grid shape and one snapshot document per point.

    ``docs[k]`` is the point with grid index ``np.unravel_index(k, shape)``; the
    first axis is the outermost.
    """

    axes: list[tuple[str, list[float] | list[int]]]
    shape: tuple[int, ...]
    docs: list[dict[str, Any]] = field(repr=False)

    @property
    def total(self) -> int:
        return len(self.docs)

    @property
    def columns(self) -> list[str]:
        """Row keys in order: the varied paths, then :data:`METRIC_COLUMNS`."""
        return [p for p, _ in self.axes] + list(METRIC_COLUMNS)

    def point_values(self, index: int) -> dict[str, float | int]:
        """The varied values of point ``index`` by path."""
        at = np.unravel_index(index, self.shape)
        return {p: vals[int(i)] for (p, vals), i in zip(self.axes, at, strict=True)}


@dataclass(frozen=True)
class SweepProgress:
    """What ``progress`` receives after each point: counts, the point and its row."""

    done: int
    total: int
    index: int
    row: dict[str, Any]


# --------------------------------------------------------------------------- vary specs

_NAME = r"[A-Za-z_][A-Za-z0-9_]*"
_PATH_RE = re.compile(rf"{_NAME}(?:\.{_NAME}|\[\d+\])*\Z")
_TOKEN_RE = re.compile(rf"\.?({_NAME})|\[(\d+)\]")


def _check_path_syntax(path: str) -> None:
    if not isinstance(path, str) or not _PATH_RE.match(path):
        raise SweepError(
            str(path),
            "not a snapshot path; write it like screen.distance or aperture.elements[0].width",
        )


def _check_range(v: Vary) -> None:
    for name, x in (("START", v.start), ("STOP", v.stop)):
        if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
            raise SweepError(v.path, f"{name} must be a finite number, got {x!r}")
    if isinstance(v.count, bool) or not isinstance(v.count, int) or not 2 <= v.count <= MAX_COUNT:
        raise SweepError(
            v.path, f"COUNT must be a whole number from 2 to {MAX_COUNT}, got {v.count!r}"
        )
    if v.start == v.stop:
        raise SweepError(v.path, f"the range is empty: START and STOP are both {v.start:g}")
    if v.start > v.stop:
        raise SweepError(
            v.path,
            f"the range is reversed: START {v.start:g} is above STOP {v.stop:g}; "
            "write the smaller value first",
        )
    if v.log and v.start <= 0:
        raise SweepError(v.path, f"a log range needs START > 0, got {v.start:g}")


def _number(text: str, name: str, what: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise SweepError(what, f"{name} must be a number, got {text!r}") from None
    if not math.isfinite(x):
        raise SweepError(what, f"{name} must be a finite number, got {text!r}")
    return x


def parse_vary(text: str) -> Vary:
    """Read ``PATH=START:STOP:COUNT[:log]`` (``:lin`` is the default spacing).

    Raises
    ------
    SweepError
        Naming the path (or the text, when no path can be read) and what is wrong.
    """
    if not isinstance(text, str) or "=" not in text:
        raise SweepError(
            str(text), "expected PATH=START:STOP:COUNT[:log], e.g. screen.distance=0.1:10:31:log"
        )
    path, _, rng = text.partition("=")
    path = path.strip()
    _check_path_syntax(path)
    parts = [p.strip() for p in rng.split(":")]
    if len(parts) not in (3, 4):
        raise SweepError(
            path, f"expected START:STOP:COUNT or START:STOP:COUNT:log after '=', got {rng!r}"
        )
    spacing = parts[3].lower() if len(parts) == 4 else "lin"
    if spacing not in ("lin", "log"):
        raise SweepError(path, f"the spacing must be 'lin' or 'log', got {parts[3]!r}")
    start = _number(parts[0], "START", path)
    stop = _number(parts[1], "STOP", path)
    if not re.fullmatch(r"[+]?\d{1,9}", parts[2]):
        raise SweepError(
            path, f"COUNT must be a whole number from 2 to {MAX_COUNT}, got {parts[2]!r}"
        )
    return Vary(path, start, stop, int(parts[2]), spacing == "log")


# --------------------------------------------------------------------------- paths in a document


def _tokens(path: str) -> list[str | int]:
    return [name if name else int(idx) for name, idx in _TOKEN_RE.findall(path)]


def _describe(keys: Sequence[str]) -> str:
    return ", ".join(keys)


def _locate(doc: dict[str, Any], path: str) -> tuple[Any, str | int, Any]:
    """The container, the key and the current value that ``path`` names in ``doc``.

    Raises
    ------
    SweepError
        When the path does not name a single number of the physics sections.
    """
    toks = _tokens(path)
    if toks[0] not in PHYSICS_SECTIONS:
        raise SweepError(
            path,
            f"unknown section {toks[0]!r}; settings of {_describe(PHYSICS_SECTIONS)} can be varied",
        )
    node: Any = doc
    where = ""
    for n, tok in enumerate(toks):
        if isinstance(tok, int):
            if not isinstance(node, list):
                raise SweepError(path, f"{where} is not a list; it cannot take the index [{tok}]")
            if tok >= len(node):
                raise SweepError(
                    path,
                    f"{where} has {len(node)} {'entry' if len(node) == 1 else 'entries'} "
                    f"(indices 0 to {len(node) - 1}); [{tok}] is out of range"
                    if node
                    else f"{where} is empty; there is no [{tok}]",
                )
        else:
            if not isinstance(node, dict):
                raise SweepError(path, f"{where} is not a group of settings; it has no {tok!r}")
            if tok not in node:
                keys = [k for k in node if k != "shape"] if n else list(PHYSICS_SECTIONS)
                raise SweepError(
                    path,
                    f"unknown setting {tok!r}"
                    + (f" in {where}" if where else "")
                    + f"; expected one of {_describe(keys)}",
                )
        parent, key = node, tok
        node = node[tok]
        where = f"{where}[{tok}]" if isinstance(tok, int) else (f"{where}.{tok}" if where else tok)
    value = node
    if isinstance(value, (dict, list)):
        raise SweepError(path, f"{path} is a group of settings, not one number")
    if isinstance(value, (bool, str)):
        raise SweepError(
            path, f"{path} is {value!r}, not a number; only numeric settings can be varied"
        )
    return parent, key, value


def _point_doc(base: dict[str, Any], assign: dict[str, float | int]) -> dict[str, Any]:
    doc = copy.deepcopy(base)
    for path, value in assign.items():
        parent, key, _ = _locate(doc, path)
        parent[key] = value
    return doc


def _read(doc: dict[str, Any]) -> SnapshotError | None:
    try:
        snapshot.from_dict(doc)
    except SnapshotError as exc:
        return exc
    return None


def _fmt_assign(assign: dict[str, float | int]) -> str:
    return ", ".join(f"{p} = {v:g}" for p, v in assign.items())


def _rejection(assign: dict[str, float | int], exc: SnapshotError) -> str:
    path, message = exc.errors[0]
    where = f"{path}: " if path and path not in assign else ""
    return f"at {_fmt_assign(assign)}: {where}{message}"


def plan_sweep(setup, varies: Sequence[Vary | str]) -> SweepPlan:
    """Check the varied settings against ``setup`` and build the document of every point.

    Parameters
    ----------
    setup : compute.model.Setup
        The base setup; every setting not varied keeps its value.
    varies
        :class:`Vary` objects or their ``PATH=START:STOP:COUNT[:log]`` text.

    Raises
    ------
    SweepError
        For an unknown or non-numeric path, a path given twice, a bad range, too many
        points, or a value the snapshot reader refuses (with its message).
    """
    vs = [parse_vary(v) if isinstance(v, str) else v for v in varies]
    if not vs:
        raise SweepError("vary", "give at least one setting to vary")
    seen: set[str] = set()
    for v in vs:
        if v.path in seen:
            raise SweepError(v.path, "this setting is varied twice; give it once")
        seen.add(v.path)
    base = snapshot.to_dict(setup)
    axes: list[tuple[str, list[float] | list[int]]] = []
    for v in vs:
        _, _, current = _locate(base, v.path)
        axes.append((v.path, v.values(integer=isinstance(current, int))))
    shape = tuple(len(vals) for _, vals in axes)
    total = math.prod(shape)
    if total > MAX_POINTS:
        raise SweepError(
            vs[-1].path if len(vs) == 1 else "vary",
            f"{' × '.join(map(str, shape))} = {total} points; a sweep has at most {MAX_POINTS}",
        )
    # Each axis on its own first, so that a bad value is blamed on its own --vary.
    for path, vals in axes:
        for val in vals:
            exc = _read(_point_doc(base, {path: val}))
            if exc is not None:
                raise SweepError(path, _rejection({path: val}, exc))
    docs = []
    for combo in itertools.product(*(vals for _, vals in axes)):
        assign = {p: val for (p, _), val in zip(axes, combo, strict=True)}
        doc = _point_doc(base, assign)
        if len(axes) > 1:
            exc = _read(doc)
            if exc is not None:
                raise SweepError(", ".join(assign), _rejection(assign, exc))
        docs.append(doc)
    return SweepPlan(axes=axes, shape=shape, docs=docs)


# --------------------------------------------------------------------------- one point


def _blas_thread_setters() -> list[Callable[[int], int]]:
    """``openblas_set_num_threads_local`` of every OpenBLAS loaded in this process."""
    paths: set[str] = set()
    with (
        contextlib.suppress(OSError),
        open("/proc/self/maps", encoding="utf-8", errors="replace") as fh,
    ):
        for line in fh:
            name = line.rsplit(None, 1)[-1] if "/" in line else ""
            if "openblas" in Path(name).name.lower():
                paths.add(name)
    if not paths:
        libs = Path(np.__file__).resolve().parent.parent / "numpy.libs"
        paths.update(str(p) for p in libs.glob("*openblas*"))
    setters = []
    for p in sorted(paths):
        try:
            fn = ctypes.CDLL(p).openblas_set_num_threads_local
        except (OSError, AttributeError):
            continue
        fn.restype, fn.argtypes = ctypes.c_int, [ctypes.c_int]
        setters.append(fn)
    return setters


_SETTERS: list[Callable[[int], int]] | None = None
_SETTERS_LOCK = threading.Lock()


@contextlib.contextmanager
def _one_blas_thread() -> Iterator[None]:
    """Hold the BLAS of the calling thread to one thread, then restore it.

    A matrix product split over several threads rounds differently from one on a
    single thread; with one thread everywhere, a point gives the same bits in this
    process and in any Dask worker. The setting is local to the calling thread.
    Where no OpenBLAS with a thread-local setter is loaded this does nothing.
    """
    global _SETTERS
    with _SETTERS_LOCK:
        if _SETTERS is None:
            _SETTERS = _blas_thread_setters()
    previous = [(fn, fn(1)) for fn in _SETTERS]
    try:
        yield
    finally:
        for fn, n in previous:
            fn(max(1, n))


def _empty_row(error: str | None) -> dict[str, Any]:
    row: dict[str, Any] = dict.fromkeys(METRIC_COLUMNS)
    row["error"] = error
    return row


def compute_point(doc: dict[str, Any], *, fft_threads: int | None = None) -> dict[str, Any]:
    """Compute one snapshot document and read its metrics (the :data:`METRIC_COLUMNS`).

    A setup that the engine refuses (over the memory limit, say) gives a row with
    ``error`` set and every metric None. This is the function every executor runs.

    ``fft_threads``, when given, sets the FFT threads of this whole process from now
    on: a worker process of a local cluster computes one point at a time, and two
    such processes with two FFT threads each only get in each other's way on two
    cores. The numbers do not depend on it.
    """
    if fft_threads is not None:
        _fft.WORKERS = fft_threads
    setup = snapshot.from_dict(doc)
    with _one_blas_thread():
        try:
            result = engine.compute(setup, use_cache=False)
        except SetupError as exc:
            return _empty_row(f"{exc.path}: {exc.message}")
        s = metrics.summary(result.x, result.y, result.intensity)
    plan = result.plan
    row = _empty_row(None)
    row.update(
        {
            "fresnel_number": float(plan.fresnel_number),
            "method": plan.method,
            "variant": plan.variant,
            "validity": plan.worst,
            "peak_irradiance": s["peak"],
            "peak_x": s["peak_x"],
            "peak_y": s["peak_y"],
            "window_power": s["power"],
            "d4sigma_x": s["d4sigma_x"],
            "d4sigma_y": s["d4sigma_y"],
            "central_lobe_x": s["central_lobe_x"],
            "central_lobe_y": s["central_lobe_y"],
            "fwhm_x": s["fwhm_x"],
            "fwhm_y": s["fwhm_y"],
            "visibility": s["visibility_x"],
        }
    )
    return row


# --------------------------------------------------------------------------- executors

Progress = Callable[[SweepProgress], None]
Cancel = Callable[[], bool]


def _row(plan: SweepPlan, index: int, metrics_row: dict[str, Any]) -> dict[str, Any]:
    row: dict[str, Any] = dict(plan.point_values(index))
    row.update(metrics_row)
    return row


class _Rows:
    """Rows of a sweep as they arrive, in grid order, with the progress report."""

    def __init__(self, plan: SweepPlan, progress: Progress | None):
        self.plan, self.progress = plan, progress
        self.rows: list[dict[str, Any] | None] = [None] * plan.total
        self.done = 0

    def put(self, k: int, metrics_row: dict[str, Any]) -> None:
        self.rows[k] = _row(self.plan, k, metrics_row)
        self.done += 1
        if self.progress is not None:
            self.progress(SweepProgress(self.done, self.plan.total, k, self.rows[k]))

    def cancelled(self) -> Cancelled:
        return Cancelled([(k, r) for k, r in enumerate(self.rows) if r is not None])

    def result(self) -> list[dict[str, Any]]:
        assert all(r is not None for r in self.rows)
        return list(self.rows)  # type: ignore[arg-type]


def _run_serial(out: _Rows, cancel: Cancel | None) -> None:
    for k, doc in enumerate(out.plan.docs):
        if cancel is not None and cancel():
            raise out.cancelled()
        out.put(k, compute_point(doc))


def _wait_for_workers(client, address: str, cancel: Cancel | None) -> None:
    deadline = time.monotonic() + CONNECT_TIMEOUT_S
    while not client.nthreads():
        if cancel is not None and cancel():
            raise Cancelled()
        if time.monotonic() > deadline:
            raise SweepError(
                "scheduler",
                f"the Dask scheduler at {address} has no workers after "
                f"{CONNECT_TIMEOUT_S:g} s; start one with 'dask worker {address}'",
            )
        time.sleep(0.1)


def _run_dask(client, out: _Rows, cancel: Cancel | None, fft_threads: int | None = None) -> None:
    """Compute every point on the client's workers."""
    from distributed import as_completed

    futures = client.map(compute_point, out.plan.docs, pure=False, fft_threads=fft_threads)
    index_of = {f.key: k for k, f in enumerate(futures)}
    pending = as_completed(futures)
    try:
        while not pending.is_empty():
            if cancel is not None and cancel():
                raise out.cancelled()
            if not pending.has_ready():
                time.sleep(POLL_S)
                continue
            for fut in pending.next_batch(block=False):
                try:
                    metrics_row = fut.result()
                except ModuleNotFoundError as exc:
                    raise SweepError(
                        "workers",
                        f"a Dask worker cannot import {exc.name!r}; install fringebench "
                        "in the environment of every worker",
                    ) from None
                out.put(index_of[fut.key], metrics_row)
    finally:
        unfinished = [f for f in futures if not f.done()]
        if unfinished:
            client.cancel(unfinished)


def _worker_start_method() -> str:
    """How the local workers' processes start: ``fork`` where it is safe, else ``spawn``.

    A forked worker is a copy of this process with numpy, scipy and compute already
    imported: it is ready in a fraction of a second, where a spawned one starts a
    fresh interpreter and imports everything again (3-6 s for two, measured here,
    against 0.3 s forked). A fork copies only the calling thread, and with it any lock
    another thread holds at that moment, so it is used only while this process runs
    no other Python thread (the command line); a server with its own threads spawns.
    """
    import multiprocessing

    if "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1:
        return "fork"
    return "spawn"


def _start_local_cluster(workers: int):
    import logging

    import dask
    from distributed import Client, LocalCluster

    # Dask starts its workers with MALLOC_TRIM_THRESHOLD_ set, so that freed memory
    # goes back to the system at once; a point allocates and frees arrays of many
    # megabytes, which then fault in afresh every time (half as slow again per
    # point, measured here). glibc's adaptive default keeps them.
    environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ", {}))
    environ.pop("MALLOC_TRIM_THRESHOLD_", None)
    settings = {
        "distributed.nanny.pre-spawn-environ": environ,
        "distributed.worker.multiprocessing-method": _worker_start_method(),
    }
    with dask.config.set(settings):
        cluster = LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=None,
            host="127.0.0.1",
            scheduler_port=0,
            silence_logs=logging.CRITICAL,
            # No dashboard; its health endpoint on a free loopback port, not on 8787.
            scheduler_kwargs={"dashboard": False, "dashboard_address": "127.0.0.1:0"},
            preload=["compute.sweep"],  # imported while the workers start
        )
    try:
        return cluster, Client(cluster)
    except BaseException:
        cluster.close()
        raise


def run_sweep(
    setup,
    varies: Sequence[Vary | str],
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    progress: Progress | None = None,
    cancel: Cancel | None = None,
) -> list[dict[str, Any]]:
    """Compute every point of a sweep; return one row per point in grid order.

    Parameters
    ----------
    setup : compute.model.Setup
        The base setup.
    varies
        :class:`Vary` objects or ``PATH=START:STOP:COUNT[:log]`` texts; the first is
        the outermost axis of the grid.
    workers, scheduler, progress, cancel
        As :func:`run_plan`.

    Returns
    -------
    list of dict
        Keys: the varied paths, then :data:`METRIC_COLUMNS` (see the module docstring).

    Raises
    ------
    SweepError
        For a bad vary spec, a bad value, a bad executor choice or an unreachable
        scheduler; nothing is computed then.
    Cancelled
        When ``cancel`` asked to stop.
    """
    _check_executor(workers, scheduler)
    return run_plan(
        plan_sweep(setup, varies),
        workers=workers,
        scheduler=scheduler,
        progress=progress,
        cancel=cancel,
    )


def _check_executor(workers: int | None, scheduler: str | None) -> None:
    if workers is not None and scheduler is not None:
        raise SweepError("workers", "choose local workers or a scheduler, not both")
    if workers is not None and (
        isinstance(workers, bool) or not isinstance(workers, int) or not 1 <= workers <= 256
    ):
        raise SweepError("workers", f"expected a number of workers from 1 to 256, got {workers!r}")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise SweepError("scheduler", f"expected a scheduler address, got {scheduler!r}")


def run_plan(
    plan: SweepPlan,
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    progress: Progress | None = None,
    cancel: Cancel | None = None,
) -> list[dict[str, Any]]:
    """Compute the points of a checked sweep (:func:`plan_sweep`); rows in grid order.

    Parameters
    ----------
    plan
        The sweep.
    workers
        Run on a local Dask cluster of this many single-threaded worker processes,
        bound to 127.0.0.1, started here and shut down at the end. Starting them
        takes a few seconds, so this pays off for sweeps longer than that.
    scheduler
        Run on the workers of an existing Dask scheduler at this address
        (``tcp://host:port``). At most one of ``workers`` and ``scheduler``; with
        neither the points run one after the other in this thread.
    progress
        Called in the calling thread after each point with a :class:`SweepProgress`.
    cancel
        Called between points (and every few hundredths of a second while Dask
        workers compute); when it returns true the sweep stops, unfinished points
        are cancelled and :class:`Cancelled` is raised. A point that is being
        computed in this thread runs to its end.

    Raises
    ------
    SweepError
        For a bad executor choice, an unreachable scheduler or workers that cannot
        import fringebench.
    Cancelled
        When ``cancel`` asked to stop.
    """
    _check_executor(workers, scheduler)
    out = _Rows(plan, progress)
    if workers is None and scheduler is None:
        _run_serial(out, cancel)
        return out.result()
    if workers is not None:
        cluster, client = _start_local_cluster(workers)
        with cluster, client:
            # Our own single-threaded workers: one FFT thread each.
            _run_dask(client, out, cancel, fft_threads=1)
        return out.result()

    from distributed import Client

    address = scheduler.strip()
    try:
        client = Client(address, timeout=CONNECT_TIMEOUT_S)
    except (OSError, ValueError, TypeError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise SweepError(
            "scheduler", f"cannot reach a Dask scheduler at {address}: {reason}"
        ) from None
    with client:
        _wait_for_workers(client, address, cancel)
        _run_dask(client, out, cancel)
    return out.result()
