"""What the sessions of one server share: the compute queue and the follow registry.

Every browser has its own :class:`~server.dashboard.Dashboard`. Two things are
server-wide and thread-safe:

* :data:`COMPUTE_QUEUE`, a :class:`ComputeQueue`: a bounded set of worker
  threads. Each session has at most one computation in it at a time (the
  dashboard coalesces its own requests), jobs start in the order they arrive,
  the working memory of the running jobs stays inside a budget, and one spare
  lane opens when every regular lane has been busy for a while, so that long
  computations in some sessions do not block the short ones of the others.
* :data:`REGISTRY`, a :class:`FollowRegistry`: the sessions whose owner has
  published them, each under an unguessable token. A session opened with
  ``?follow=TOKEN`` mirrors the published one (its setup, view and the very
  same result objects, recomputing nothing), with its controls disabled, until
  its user makes an own copy.

Updates reach a follower through its own document's next-tick callback, so
that a follower's models are only ever changed in its own session context.
"""

from __future__ import annotations

import contextlib
import heapq
import html
import logging
import os
import re
import secrets
import threading
import time
from collections import deque
from collections.abc import Callable, Iterable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any
from urllib.parse import urlencode

import panel as pn
from panel.io.state import set_curdoc

from compute import engine, snapshot, workload
from compute import fft as _fft
from compute.cancel import Cancelled, cancel_scope, checkpoint
from compute.errors import SetupError
from compute.model import Setup
from compute.planning import DEFAULT_MEMORY_LIMIT

__all__ = [
    "APPLY_QUEUE",
    "COMPUTE_QUEUE",
    "DEFAULT_INTERACTIVE_GFLOP",
    "DEFAULT_MAX_WORK_GFLOP",
    "FOLLOW_QUERY_KEY",
    "PRIORITY_BACKGROUND",
    "PRIORITY_FOLLOWER",
    "PRIORITY_HOST",
    "PRIORITY_OTHER",
    "READ_ONLY_TEXT",
    "REGISTRY",
    "ApplyQueue",
    "ComputeQueue",
    "FollowLink",
    "FollowRegistry",
    "Publication",
    "SessionSharing",
    "SharedState",
    "default_memory_budget",
    "default_workers",
    "estimate_work",
    "offload",
    "run_in_session",
]

log = logging.getLogger("fringebench.sharing")

#: The query key of a follow link: ``/?follow=TOKEN``.
FOLLOW_QUERY_KEY = "follow"
READ_ONLY_TEXT = (
    "This view follows a shared session and is read-only; use “Make my own copy” to change it."
)
_TOKEN = re.compile(r"^[A-Za-z0-9_-]{16,64}$")

#: Who goes first, in the compute queue and onto the screen (lower first): the
#: host (a published session, or this machine's own browser on a shared
#: server), then the host's followers, then every other session.
PRIORITY_HOST = 0
PRIORITY_FOLLOWER = 1
PRIORITY_OTHER = 2
#: Added to a session's priority for work it did not wait for at the screen (the
#: along-z image, sweep points): every session's screen result goes before it.
PRIORITY_BACKGROUND = 3


# ------------------------------------------------------------------ compute queue


def default_workers() -> int:
    """Regular worker lanes: one per core, from one to four."""
    return max(1, min(4, os.cpu_count() or 1))


def default_memory_budget(workers: int | None = None) -> int:
    """Working memory that the running computations may hold together, bytes.

    Half the physical memory, and no more than every lane (the spare included)
    at the per-computation limit of the planner.
    """
    lanes = (workers or default_workers()) + 1
    try:
        physical = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        physical = 4 * DEFAULT_MEMORY_LIMIT
    return int(min(physical // 2, lanes * DEFAULT_MEMORY_LIMIT))


def estimate_bytes(setup: Setup) -> int:
    """Working memory that computing ``setup`` will take: 0 for a cached result.

    Raises
    ------
    SetupError
        When the planner refuses the setup (the same message a computation gives).
    """
    if engine.RESULT_CACHE.get(snapshot.physics_hash(setup)) is not None:
        return 0
    return int(engine.check(setup).memory_bytes)


#: Largest computation a server starts, GFLOP (``serve --max-work``): about a minute
#: or two of one core of a current desktop; a setup above it is refused before it runs.
DEFAULT_MAX_WORK_GFLOP = 200.0
#: Up to this many GFLOP a job counts as an interactive update (a second or two); a
#: heavier one runs only on the lanes that heavy work may hold, never on all of them.
DEFAULT_INTERACTIVE_GFLOP = 4.0


def estimate_work(setup: Setup) -> workload.Work | int:
    """The :class:`~compute.workload.Work` of computing ``setup``: 0 for a cached result.

    Raises
    ------
    SetupError
        When the planner refuses the setup (the same message a computation gives).
    """
    if engine.RESULT_CACHE.get(snapshot.physics_hash(setup)) is not None:
        return 0
    return workload.estimate(setup)


#: Niceness of the threads that run heavy jobs and read imported files: the
#: operating system gives the event loop and the interactive updates the cores first.
LOW_PRIORITY = 10


def _lower_this_thread() -> None:
    """Lower the scheduling priority of the calling thread alone (Linux: threads are tasks)."""
    # Where the system has no per-thread priority, the lane limits still hold.
    with contextlib.suppress(AttributeError, OSError):
        os.setpriority(os.PRIO_PROCESS, threading.get_native_id(), LOW_PRIORITY)


def _run_heavy(fn: Callable[[], Any], cancel: threading.Event | None) -> Any:
    """Run a heavy job on a fresh thread of low priority, its transforms on one core."""
    box: dict[str, Any] = {}

    def run() -> None:
        _lower_this_thread()
        try:
            with _fft.one_thread(), cancel_scope(cancel):
                box["value"] = fn()
        except BaseException as exc:  # handed to the lane, which reports it
            box["error"] = exc

    worker = threading.Thread(target=run, name="fringebench-heavy", daemon=True)
    worker.start()
    worker.join()
    if "error" in box:
        raise box["error"]
    return box["value"]


@dataclass
class _Job:
    fn: Callable[[], Any]
    future: Future
    nbytes: int | None  # None while its plan is being made
    priority: int
    seq: int
    submitted: float = 0.0
    heavy: bool = False
    cancel: threading.Event | None = None


class ComputeQueue:
    """A bounded, server-wide queue of computations, by priority and then arrival.

    Background work (priority :data:`PRIORITY_BACKGROUND` and above: along-z
    images, sweep points) runs on at most all regular lanes but one, never on the
    spare lane, so that it cannot keep any session's screen result waiting long.

    Parameters
    ----------
    workers
        Regular lanes (threads); the default is one per core.
    memory_budget
        Bytes that the running jobs may hold together (their plans' estimates).
        A job alone over the budget is refused; one that fits waits for room.
    spare_after
        Seconds after which, when every regular lane is still busy, one spare
        lane takes the next job; long jobs then hold at most all regular lanes.
    estimate
        ``setup -> bytes`` or ``setup -> Work``; the plan's work by default (0 for
        a cached result). It runs on a thread of its own, never on the caller's
        (the event loop), since planning a large setup takes seconds.
    max_work
        Floating-point operations above which a job is refused before it runs
        (:data:`DEFAULT_MAX_WORK_GFLOP` by default).
    interactive_work
        Operations up to which a job is an interactive update; heavier jobs hold
        at most all regular lanes but one (and never the spare lane), together
        with background work, so that an ordinary edit always finds a lane.
    """

    #: Seconds a lane waits for a job still being planned that arrived before the
    #: ones ready to run (so that arrival order holds for ordinary plans of a few ms).
    order_grace = 0.25

    def __init__(
        self,
        workers: int | None = None,
        memory_budget: int | None = None,
        *,
        spare_after: float = 2.0,
        estimate: Callable[[Setup], Any] = estimate_work,
        max_work: float | None = None,
        interactive_work: float | None = None,
    ):
        self._cond = threading.Condition()
        self._pending: deque[_Job] = deque()
        self._started: dict[int, float] = {}  # lane -> monotonic start of its job
        self._background: set[int] = set()  # lanes running background work
        self._used = 0
        self._seq = 0
        self._threads: list[threading.Thread] = []
        self._closed = False
        self._estimate = estimate
        self.workers = workers or default_workers()
        self.memory_budget = memory_budget or default_memory_budget(self.workers)
        self.spare_after = float(spare_after)
        self.max_work = float(max_work) if max_work else DEFAULT_MAX_WORK_GFLOP * 1e9
        self.interactive_work = (
            float(interactive_work) if interactive_work else DEFAULT_INTERACTIVE_GFLOP * 1e9
        )
        self._heavy: set[int] = set()  # lanes running heavy jobs
        self.peak_bytes = 0  # the most memory the running jobs held together
        self.peak_running = 0
        self.completed = 0
        self.refused = 0
        self.cancelled = 0

    def configure(
        self,
        *,
        workers: int | None = None,
        memory_budget: int | None = None,
        spare_after: float | None = None,
        max_work: float | None = None,
        interactive_work: float | None = None,
    ) -> None:
        """Change the limits; the number of lanes only before the first job.

        ``max_work`` and ``interactive_work`` are floating-point operations.
        """
        with self._cond:
            if workers is not None and workers != self.workers:
                if self._threads:
                    raise RuntimeError("the compute queue has started; its lanes are fixed")
                if workers < 1:
                    raise ValueError("workers: at least one lane is needed")
                self.workers = int(workers)
            if memory_budget is not None:
                if memory_budget <= 0:
                    raise ValueError("memory_budget: a positive number of bytes is needed")
                self.memory_budget = int(memory_budget)
            if spare_after is not None:
                self.spare_after = float(spare_after)
            for name, value in (("max_work", max_work), ("interactive_work", interactive_work)):
                if value is not None:
                    if not value > 0:
                        raise ValueError(f"{name}: a positive number of operations is needed")
                    setattr(self, name, float(value))
            self._cond.notify_all()

    # -------------------------------------------------------------- public

    def submit(
        self,
        setup: Setup,
        fn: Callable[[], Any],
        *,
        priority: int = PRIORITY_OTHER,
        estimate: Callable[[], Any] | None = None,
        cancel: threading.Event | None = None,
    ) -> Future:
        """Queue ``fn`` (which computes ``setup``) and return its future at once.

        The setup is planned on a thread of its own; the job then starts by
        ``priority`` (lower first), then in arrival order. The future fails with
        a :class:`SetupError` when the setup cannot be planned, needs more memory
        than the whole budget or more work than :attr:`max_work`. ``estimate``
        gives the job's working memory in bytes (or its ``Work``) when it is not
        the screen computation of ``setup``. Setting ``cancel`` stops the job: it
        never starts, or a running sum stops before its next screen, and the
        future fails with :class:`~compute.cancel.Cancelled`.
        """
        fut: Future = Future()
        with self._cond:
            if self._closed:
                raise RuntimeError("the compute queue is closed")
            self._seq += 1
            job = _Job(fn, fut, None, int(priority), self._seq, time.monotonic(), cancel=cancel)
            self._pending.append(job)
        sizing = threading.Thread(
            target=self._size,
            args=(job, setup, estimate),
            name=f"fringebench-plan-{job.seq}",
            daemon=True,
        )
        sizing.start()
        return fut

    def _size(self, job: _Job, setup: Setup, estimate: Callable[[], Any] | None) -> None:
        """Plan ``job`` off the caller's thread; then queue it, or refuse it."""
        failure: BaseException | None = None
        try:
            with cancel_scope(job.cancel):
                checkpoint()
                size = estimate() if estimate is not None else self._estimate(setup)
                checkpoint()
        except BaseException as exc:  # the planner's refusal, shown as the job's failure
            failure, size = exc, 0
        work = size if isinstance(size, workload.Work) else None
        nbytes = work.memory_bytes if work is not None else int(size)
        if failure is None and nbytes > self.memory_budget:
            failure = SetupError(
                "numerics.grid",
                f"the computation needs about {nbytes / 2**30:.3g} GiB while this server "
                f"allows {self.memory_budget / 2**30:.3g} GiB for all sessions together; "
                "use fewer screen samples, a smaller grid or a narrower window",
            )
        if failure is None and work is not None and work.flops > self.max_work:
            failure = SetupError(
                "numerics.grid",
                f"the computation is {work.describe()}, over this server's limit of "
                f"{self.max_work / 1e9:.3g} GFLOP per computation; use fewer spectral "
                "samples, a smaller source, fewer screen samples or a coarser grid",
            )
        with self._cond:
            if failure is not None:
                self._pending.remove(job)
                if isinstance(failure, Cancelled):
                    self.cancelled += 1
                elif isinstance(failure, SetupError) and failure.path == "numerics.grid":
                    self.refused += 1
            else:
                job.nbytes = nbytes
                job.heavy = work is not None and work.flops > self.interactive_work
                self._ensure_lanes()
            self._cond.notify_all()
        if failure is not None:
            job.future.set_exception(failure)

    def stats(self) -> dict[str, int]:
        """Queued and running jobs, memory in use and the peaks, for status and tests."""
        with self._cond:
            return {
                "queued": len(self._pending),
                "running": len(self._started),
                "bytes_in_use": self._used,
                "peak_bytes": self.peak_bytes,
                "peak_running": self.peak_running,
                "completed": self.completed,
                "refused": self.refused,
                "cancelled": self.cancelled,
                "heavy_running": len(self._heavy),
                "lanes": len(self._threads),
            }

    def close(self, timeout: float = 10.0) -> None:
        """Stop the lanes once the queued jobs are done (tests; a server just exits)."""
        with self._cond:
            self._closed = True
            self._cond.notify_all()
            threads = list(self._threads)
        for t in threads:
            t.join(timeout)

    # ------------------------------------------------------------- internals

    def _ensure_lanes(self) -> None:
        while len(self._threads) < self.workers + 1:  # the last one is the spare
            lane = len(self._threads)
            t = threading.Thread(
                target=self._run_lane,
                args=(lane,),
                name=f"fringebench-compute-{lane}",
                daemon=True,
            )
            self._threads.append(t)
            t.start()

    def _regular_busy_since(self) -> float | None:
        """Start of the most recent job when every regular lane is busy, else None."""
        starts = [self._started.get(lane) for lane in range(self.workers)]
        if any(s is None for s in starts):
            return None
        return max(starts)  # type: ignore[type-var]

    def _take(self, lane: int) -> tuple[_Job | None, float | None]:
        """The next job this lane may run, or (None, seconds to wait; None = until told)."""
        if lane >= self.workers:  # the spare lane
            since = self._regular_busy_since()
            if since is None:
                return None, None
            left = since + self.spare_after - time.monotonic()
            if left > 0:
                return None, left
        # By priority, then arrival, passing over jobs that do not fit in memory yet.
        # Background and heavy work take at most all regular lanes but one and never
        # the spare, so that a screen result or an ordinary edit always finds a lane.
        slow_ok = lane < self.workers and len(self._background | self._heavy) < max(
            1, self.workers - 1
        )
        for j in [j for j in self._pending if j.cancel is not None and j.cancel.is_set()]:
            if j.nbytes is not None:  # still sizing: its own thread drops it
                self._pending.remove(j)
                self.cancelled += 1
                j.future.set_exception(Cancelled())
        fitting = [
            j
            for j in self._pending
            if j.nbytes is not None
            and self._used + j.nbytes <= self.memory_budget
            and (slow_ok or (j.priority < PRIORITY_BACKGROUND and not j.heavy))
        ]
        if not fitting:
            return None, None
        job = min(fitting, key=lambda j: (j.priority, j.seq))
        # Keep arrival order over a job that is still being planned, briefly.
        now = time.monotonic()
        ahead = [
            j.submitted + self.order_grace - now
            for j in self._pending
            if j.nbytes is None and (j.priority, j.seq) < (job.priority, job.seq)
        ]
        ahead = [t for t in ahead if t > 0]
        if ahead:
            return None, max(ahead)
        self._pending.remove(job)
        return job, None

    def _run_lane(self, lane: int) -> None:
        while True:
            with self._cond:
                while True:
                    job, wait = self._take(lane)
                    if job is not None:
                        break
                    if self._closed and not self._pending:
                        return
                    self._cond.wait(timeout=wait)
                self._started[lane] = time.monotonic()
                if job.priority >= PRIORITY_BACKGROUND:
                    self._background.add(lane)
                if job.heavy:
                    self._heavy.add(lane)
                self._used += job.nbytes
                self.peak_bytes = max(self.peak_bytes, self._used)
                self.peak_running = max(self.peak_running, len(self._started))
                self._cond.notify_all()  # the spare lane keeps time from here
            try:
                if job.future.set_running_or_notify_cancel():
                    try:
                        with cancel_scope(job.cancel):
                            checkpoint()
                            value = _run_heavy(job.fn, job.cancel) if job.heavy else job.fn()
                    except BaseException as exc:  # delivered to the session as its failure
                        if isinstance(exc, Cancelled):
                            with self._cond:
                                self.cancelled += 1
                        job.future.set_exception(exc)
                    else:
                        job.future.set_result(value)
            finally:
                with self._cond:
                    del self._started[lane]
                    self._background.discard(lane)
                    self._heavy.discard(lane)
                    self._used -= job.nbytes
                    self.completed += 1
                    self._cond.notify_all()


#: The queue of this process; :func:`server.serving.serve` sets its limits.
COMPUTE_QUEUE = ComputeQueue()

#: Reading imported snapshots: two at a time, never on the event loop.
_READERS = ThreadPoolExecutor(
    max_workers=2, thread_name_prefix="fringebench-read", initializer=_lower_this_thread
)


def offload(fn: Callable[[], Any]) -> Future:
    """Run ``fn`` (reading a user's file) on a worker thread; its future."""
    return _READERS.submit(fn)


# ------------------------------------------------------------- follow registry


def _next_tick(doc: Any, fn: Callable[[], None]) -> bool:
    """Queue ``fn`` on ``doc``'s next tick, with ``doc`` as the current document."""

    def in_session() -> None:
        with set_curdoc(doc):
            fn()

    try:
        doc.add_next_tick_callback(in_session)
    except Exception:  # the document is no longer served
        return False
    return True


class ApplyQueue:
    """Puts results on the sessions' screens one at a time: by priority, then arrival.

    Every session of a server shares one event loop, and drawing a new result
    there takes a good part of a second. In plain arrival order a host would
    wait behind every busy colleague; here the next item goes to the loop only
    once the previous one has run (or after ``stall_after`` seconds, should its
    session have closed meanwhile), the host's first.

    Parameters
    ----------
    stall_after
        Seconds after which an item that has not run no longer holds the queue.
    """

    def __init__(self, stall_after: float = 2.0):
        self.stall_after = float(stall_after)
        self._lock = threading.Lock()
        self._heap: list[tuple[int, int, Any, Callable[[], None]]] = []
        self._seq = 0
        self._loop: Any = None
        self._current: object | None = None  # the item in flight (None: idle)
        self.applied = 0

    def attach(self, loop: Any) -> None:
        """Order the callbacks of sessions served on ``loop`` (a Tornado IOLoop)."""
        self._loop = loop

    def schedule(self, doc: Any, fn: Callable[[], None], priority: int) -> bool:
        """Run ``fn`` in ``doc``'s session when its turn comes; safe from any thread."""
        loop = self._loop
        if loop is None:
            return _next_tick(doc, fn)
        with self._lock:
            self._seq += 1
            heapq.heappush(self._heap, (int(priority), self._seq, doc, fn))
            idle = self._current is None
            if idle:
                self._current = object()
        if idle:
            loop.add_callback(self._dispatch)
        return True

    def _dispatch(self) -> None:  # on the loop
        while True:
            with self._lock:
                if not self._heap:
                    self._current = None
                    return
                _priority, _seq, doc, fn = heapq.heappop(self._heap)
                token = self._current = object()

            def run(token: object = token, fn: Callable[[], None] = fn) -> None:
                try:
                    fn()
                finally:
                    self.applied += 1
                    self._done(token)

            if _next_tick(doc, run):
                self._loop.call_later(self.stall_after, self._done, token)
                return
            # that session has gone: on to the next item

    def _done(self, token: object) -> None:
        with self._lock:
            if self._current is not token:
                return  # already moved on (the item ran, or it stalled)
            self._current = object()
        self._loop.add_callback(self._dispatch)


#: The screen queue of this process; :func:`server.serving.serve` attaches its loop.
APPLY_QUEUE = ApplyQueue()


def run_in_session(doc: Any, fn: Callable[[], None], priority: int = PRIORITY_OTHER) -> bool:
    """Run ``fn`` in ``doc``'s session (with ``doc`` as the current document), in turn.

    Safe from any thread. Without a server session ``fn`` runs now. Returns
    False when the session has gone.
    """
    if doc is None or getattr(doc, "session_context", None) is None:
        fn()
        return True
    return APPLY_QUEUE.schedule(doc, fn, priority)


@dataclass(frozen=True)
class SharedState:
    """What a follower shows: the host's setup of the result on screen, and its view."""

    setup: Setup | None
    result: Any  # compute.engine.Result, the host's own object
    preview: tuple | None
    view: dict
    version: int


class FollowLink:
    """One follower session attached to one publication."""

    def __init__(self, dashboard: Any, doc: Any, publication: Publication):
        self.dashboard = dashboard
        self.doc = doc
        self.publication = publication
        self.closed = False
        self.applied = 0  # states put on the follower's screen
        self._lock = threading.Lock()
        self._pending: SharedState | None = None
        self.on_end: Callable[[str], None] | None = None
        self.on_applied: Callable[[], None] | None = None

    def push(self, state: SharedState) -> None:
        """Show ``state`` on the follower soon; only the newest of a burst is applied."""
        with self._lock:
            if self.closed:
                return
            first = self._pending is None
            self._pending = state
        if first and not run_in_session(self.doc, self._apply_pending, PRIORITY_FOLLOWER):
            self.close()

    def _apply_pending(self) -> None:
        with self._lock:
            state, self._pending = self._pending, None
            if state is None or self.closed:
                return
        self.apply(state)

    def apply(self, state: SharedState) -> None:
        """Show ``state`` now (in the follower's session context)."""
        if state.setup is not None:
            self.dashboard.show_shared(state.setup, state.result, state.preview, state.view)
        self.applied += 1
        if self.on_applied is not None:
            self.on_applied()

    def close(self) -> None:
        """Stop receiving updates (the follower detached or its session ended)."""
        with self._lock:
            if self.closed:
                return
            self.closed = True
            self._pending = None
        self.publication.remove(self)

    def ended(self, why: str) -> None:
        """The publication ended: tell the follower's session, in its own context."""
        with self._lock:
            if self.closed:
                return
            self.closed = True
            self._pending = None
        callback = self.on_end
        if callback is not None:
            run_in_session(self.doc, lambda: callback(why), PRIORITY_FOLLOWER)


class Publication:
    """A published session: its latest state and its followers."""

    def __init__(self, token: str, on_count: Callable[[int], None] | None = None):
        self.token = token
        self._lock = threading.Lock()
        self._followers: list[FollowLink] = []
        self._state: SharedState | None = None
        self._version = 0
        self._closed = False
        self._on_count = on_count

    @property
    def closed(self) -> bool:
        return self._closed

    @property
    def followers(self) -> int:
        with self._lock:
            return len(self._followers)

    def state(self) -> SharedState | None:
        with self._lock:
            return self._state

    def update(self, setup: Setup | None, result: Any, preview: tuple | None, view: dict) -> None:
        """Record the host's newest state and push it to every follower."""
        with self._lock:
            if self._closed:
                return
            self._version += 1
            self._state = SharedState(setup, result, preview, dict(view), self._version)
            state, followers = self._state, list(self._followers)
        for link in followers:
            link.push(state)

    def add(self, dashboard: Any, doc: Any) -> FollowLink:
        """Attach a follower (the caller shows it the current :meth:`state`)."""
        link = FollowLink(dashboard, doc, self)
        with self._lock:
            if self._closed:
                raise LookupError("this session is no longer shared")
            self._followers.append(link)
            count = len(self._followers)
        self._count_changed(count)
        return link

    def remove(self, link: FollowLink) -> None:
        with self._lock:
            if link not in self._followers:
                return
            self._followers.remove(link)
            count = len(self._followers)
        self._count_changed(count)

    def close(self, why: str) -> None:
        """End the publication; every follower is told ``why`` and keeps an own copy."""
        with self._lock:
            if self._closed:
                return
            self._closed = True
            followers, self._followers = self._followers, []
        for link in followers:
            link.ended(why)

    def _count_changed(self, count: int) -> None:
        if self._on_count is not None:
            self._on_count(count)


class FollowRegistry:
    """Published sessions by token; thread-safe, one per server process."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._items: dict[str, Publication] = {}
        #: Base URLs that colleagues can open (set by :func:`server.serving.serve`).
        self.public_urls: list[str] = []

    def publish(self, on_count: Callable[[int], None] | None = None) -> Publication:
        """A new publication under a fresh random token."""
        with self._lock:
            while True:
                token = secrets.token_urlsafe(18)
                if token not in self._items:
                    break
            pub = Publication(token, on_count)
            self._items[token] = pub
        return pub

    def get(self, token: str | None) -> Publication | None:
        """The open publication of ``token``; None for an unknown or malformed token."""
        if not token or not _TOKEN.match(token):
            return None
        with self._lock:
            pub = self._items.get(token)
        return pub if pub is not None and not pub.closed else None

    def unpublish(self, token: str, why: str = "the shared session has ended") -> None:
        with self._lock:
            pub = self._items.pop(token, None)
        if pub is not None:
            pub.close(why)

    def __len__(self) -> int:
        with self._lock:
            return len(self._items)

    def follow_links(self, token: str, page_base: str | None = None) -> list[str]:
        """The follow links of ``token``: one per public URL, else on the page's own base."""
        query = "?" + urlencode({FOLLOW_QUERY_KEY: token})
        bases = list(self.public_urls) or [page_base or ""]
        return [base + query for base in bases]


#: The registry of this process.
REGISTRY = FollowRegistry()


# --------------------------------------------------------------- the share bar

_BAR_CSS = """
.fb-share-line { display: flex; align-items: center; gap: 0.6em; white-space: nowrap;
  color: #e8ecf3; font-size: 0.92em; }
.fb-share-badge { border-radius: 4px; padding: 2px 8px; font-weight: 600; }
.fb-share-on { background: #0f3b37; color: #38d9c6; border: 1px solid #38d9c6; }
.fb-share-follow { background: #2a2140; color: #c9b6ff; border: 1px solid #8c74d8; }
.fb-follow-links { font-size: 0.85em; color: #8892a6; white-space: normal; word-break: break-all; }
.fb-follow-links a { color: #38d9c6; }
"""


def _pane(text: str, css: str) -> pn.pane.HTML:
    return pn.pane.HTML(text, stylesheets=[_BAR_CSS], css_classes=[css], margin=(4, 6))


class SessionSharing:
    """The share bar of one session: publish it, or follow a published one.

    Parameters
    ----------
    dashboard
        The session's dashboard; its ``share_bar`` row receives the controls.
    registry
        Where publications live.
    doc
        The session's Bokeh document (None outside a server).
    owner
        The session is this machine's own browser on a server shared on the
        network: it goes first like a published one.
    """

    def __init__(
        self,
        dashboard: Any,
        registry: FollowRegistry = REGISTRY,
        *,
        doc: Any = None,
        owner: bool = False,
    ):
        self.dashboard = dashboard
        self.registry = registry
        self.doc = doc
        self._base_priority = PRIORITY_HOST if owner else PRIORITY_OTHER
        dashboard.priority = self._base_priority
        self.publication: Publication | None = None
        self.link: FollowLink | None = None
        self._watchers: list = []
        self._locked: dict[int, tuple[Any, bool]] = {}
        self.share_button = pn.widgets.Button(
            label="Share this session",
            css_classes=["fb-share"],
            color="primary",
            variant="outline",
            width=170,
        )
        self.stop_button = pn.widgets.Button(
            label="Stop sharing",
            css_classes=["fb-unshare"],
            variant="outline",
            width=120,
            visible=False,
        )
        self.detach_button = pn.widgets.Button(
            label="Make my own copy",
            css_classes=["fb-detach"],
            color="primary",
            width=170,
            visible=False,
        )
        self.status = _pane("", "fb-share-status")
        self.links = _pane("", "fb-follow-links-pane")
        self.links.visible = False
        self.share_button.on_click(self._share_pressed)
        self.stop_button.on_click(lambda _e: self.unpublish())
        self.detach_button.on_click(lambda _e: self.detach("This is now your own copy."))
        self._own = {id(w) for w in (self.share_button, self.stop_button, self.detach_button)}
        bar = getattr(dashboard, "share_bar", None)
        if bar is not None:
            bar.objects = [
                self.status,
                self.share_button,
                self.links,
                self.stop_button,
                self.detach_button,
            ]
        if doc is not None and getattr(doc, "session_context", None) is not None:
            doc.on_session_destroyed(self._session_destroyed)
        self._show_status()

    # ------------------------------------------------------------- host side

    @property
    def followers(self) -> int:
        return self.publication.followers if self.publication is not None else 0

    def publish(self) -> Publication:
        """Share this session; colleagues with a follow link see it live."""
        if self.publication is not None:
            return self.publication
        if self.link is not None:
            raise RuntimeError("a session that follows another cannot be shared")
        pub = self.registry.publish(on_count=self._count_changed)
        self.publication = pub
        self.dashboard.priority = PRIORITY_HOST
        self._watchers.append(
            self.dashboard.param.watch(
                self._host_changed, ["results_applied", "scale", "cmap", "cut_x", "cut_y"]
            )
        )
        self._host_changed()
        self._show_status()
        return pub

    def _share_pressed(self, _event: Any = None) -> None:
        """The share button: a follower (whose button is hidden) gets a message, no error."""
        if self.link is not None:
            self.dashboard.notify(
                "warning",
                "This session follows a colleague's and cannot be shared; "
                "press Make my own copy first.",
            )
            return
        self.publish()

    def unpublish(self, why: str = "the host stopped sharing") -> None:
        """Stop sharing; followers keep what they see as their own copy."""
        pub, self.publication = self.publication, None
        for w in self._watchers:
            self.dashboard.param.unwatch(w)
        self._watchers = []
        self.dashboard.priority = self._base_priority
        if pub is not None:
            self.registry.unpublish(pub.token, why)
        self._show_status()

    def _host_changed(self, *events: Any) -> None:
        pub = self.publication
        if pub is not None:
            pub.update(*self.dashboard.shared_state())

    def _count_changed(self, count: int) -> None:
        run_in_session(self.doc, self._show_status, self.dashboard.priority)

    # --------------------------------------------------------- follower side

    def follow(self, publication: Publication) -> FollowLink:
        """Mirror ``publication`` read-only until :meth:`detach`."""
        if self.publication is not None:
            self.unpublish()
        link = publication.add(self.dashboard, self.doc)
        link.on_end = self._publication_ended
        link.on_applied = self._lock_widgets
        self.link = link
        self.dashboard.following = link
        self.dashboard.priority = PRIORITY_FOLLOWER
        state = publication.state()
        if state is not None:
            link.apply(state)
        self._lock_widgets()
        self._show_status()
        return link

    def detach(self, note: str) -> None:
        """Leave follow mode: the view stays, and it is this session's own from now on."""
        link, self.link = self.link, None
        if link is None:
            return
        link.close()
        self._finish_detach(note)

    def _publication_ended(self, why: str) -> None:
        if self.link is None:
            return
        self.link = None
        self._finish_detach(f"{why[:1].upper()}{why[1:]}; what you see is now your own copy.")

    def _finish_detach(self, note: str) -> None:
        self.dashboard.following = None
        self.dashboard.priority = self._base_priority
        for widget, was_disabled in self._locked.values():
            widget.disabled = was_disabled
        self._locked = {}
        self._drop_follow_from_address()
        self._show_status()
        self.dashboard.notify("info", note)

    def _drop_follow_from_address(self) -> None:
        loc = pn.state.location if self.doc is not None else None
        if loc is None:
            return
        query = {k: v for k, v in loc.query_params.items() if k != FOLLOW_QUERY_KEY}
        loc.search = ("?" + urlencode(query)) if query else ""

    def _widgets(self) -> Iterable[Any]:
        return self.dashboard.__panel__().select(pn.widgets.Widget)

    def _lock_widgets(self) -> None:
        """Disable every control of the follower (new editor widgets included)."""
        if self.link is None:
            return
        todo = [
            w
            for w in self._widgets()
            if id(w) not in self._own and not isinstance(w, pn.widgets.FileDownload)
        ]
        # Record every state first: disabling a composite widget disables its parts.
        for w in todo:
            if id(w) not in self._locked:
                self._locked[id(w)] = (w, bool(w.disabled))
        for w in todo:
            if not w.disabled:
                w.disabled = True

    # --------------------------------------------------------------- display

    def _page_base(self) -> str | None:
        loc = pn.state.location if self.doc is not None else None
        if loc is None or not loc.hostname:
            return None
        host = f"{loc.hostname}:{loc.port}" if loc.port else loc.hostname
        return f"{loc.protocol}//{host}{loc.pathname or '/'}"

    def _show_status(self) -> None:
        following = self.link is not None
        pub = self.publication
        if following:
            text = (
                '<div id="fb-share" class="fb-share-line" data-role="follower" '
                'data-followers="0"><span class="fb-share-badge fb-share-follow">following'
                "</span><span>a shared session · read-only</span></div>"
            )
        elif pub is not None:
            n = pub.followers
            text = (
                f'<div id="fb-share" class="fb-share-line" data-role="host" data-followers="{n}">'
                f'<span class="fb-share-badge fb-share-on">shared · {n} following</span></div>'
            )
            links = self.registry.follow_links(pub.token, self._page_base())
            items = "<br>".join(
                f'<a href="{html.escape(u)}" target="_blank">{html.escape(u)}</a>' for u in links
            )
            self.links.object = f'<div class="fb-follow-links">follow link: {items}</div>'
        else:
            text = (
                '<div id="fb-share" class="fb-share-line" data-role="own" data-followers="0"></div>'
            )
        self.status.object = text
        self.links.visible = pub is not None
        self.share_button.visible = pub is None and not following
        self.stop_button.visible = pub is not None
        self.detach_button.visible = following

    def _session_destroyed(self, _context: Any) -> None:
        if self.link is not None:
            link, self.link = self.link, None
            link.close()
        if self.publication is not None:
            pub, self.publication = self.publication, None
            self.registry.unpublish(pub.token, "the shared session has closed")
