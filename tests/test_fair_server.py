"""No single user can freeze a shared server: the unit-level checks.

Planning and reading run off the caller's thread (the event loop), a job's work
is estimated before it runs and refused over the host's limit, heavy jobs never
hold every lane, a user's newer request stops the older one between the screens
of a sum, and a polygon with many vertices is planned in ``n log n``. The load
test with real browsers is ``tests/browser/test_fair_load.py``.
"""

from __future__ import annotations

import json
import math
import threading
import time

import numpy as np
import pytest
from heavysetups import broadband_doc, many_polygons_doc

from compute import apertures, engine, incoherent, snapshot, workload
from compute.cancel import Cancelled, cancel_scope
from compute.errors import SetupError
from server import sharing
from server.app import load_preset
from server.dashboard import Dashboard

# ------------------------------------------------------------------ work estimate


def test_the_work_grows_with_the_screens_of_the_sum():
    one = workload.estimate(snapshot.from_dict(broadband_doc(wavelengths=1, diameter=0.0)))
    four = snapshot.from_dict(broadband_doc(wavelengths=4))
    w = workload.estimate(four)
    assert one.components == 1
    assert w.components == incoherent.describe(four)["components"] > 4
    # Same plan per screen: the work is the per-screen work times the screens.
    assert w.padded == one.padded
    raster = 100.0 * engine.check(four).nx * engine.check(four).ny
    assert (w.flops - raster) == pytest.approx(w.components * (one.flops - raster), rel=1e-12)
    assert w.memory_bytes == engine.check(four).memory_bytes
    assert "GFLOP" in w.describe() and f"{w.components} screens" in w.describe()


def test_the_work_of_a_convolution_counts_three_transforms_of_the_padded_grid():
    setup = snapshot.from_dict(broadband_doc(wavelengths=1, diameter=0.0))
    plan = engine.check(setup)
    n = plan.padded[0] * plan.padded[1]
    # 5 N log2 N per complex FFT: Cooley & Tukey (1965) count, common benchmark convention.
    expected = 3 * 5.0 * n * math.log2(n) + 100.0 * plan.nx * plan.ny
    assert workload.estimate(setup).flops == pytest.approx(expected, rel=1e-12)


# ----------------------------------------------------------------- compute queue


def _wait_until(check, timeout: float = 10.0) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if check():
            return True
        time.sleep(0.01)
    return check()


def test_submit_returns_at_once_and_plans_on_another_thread():
    # Before: submit() planned on the caller's thread (the event loop) and blocked it.
    gate = threading.Event()
    planned_on: list[str] = []

    def slow_estimate(setup):
        planned_on.append(threading.current_thread().name)
        gate.wait(10)
        return 0

    q = sharing.ComputeQueue(workers=1, memory_budget=100, estimate=slow_estimate)
    t0 = time.monotonic()
    fut = q.submit(object(), lambda: "done")
    assert time.monotonic() - t0 < 1.0 and not fut.done()
    assert _wait_until(lambda: planned_on)
    assert planned_on[0] != threading.current_thread().name
    gate.set()
    assert fut.result(10) == "done"
    q.close()


def _work(gflop: float, nbytes: int = 1) -> workload.Work:
    return workload.Work(gflop * 1e9, 1, nbytes, "angular_spectrum", (64, 64))


def test_a_job_over_the_work_limit_is_refused_with_its_estimate_and_never_runs():
    q = sharing.ComputeQueue(workers=1, memory_budget=100, estimate=lambda s: s, max_work=10e9)
    ran = []
    fut = q.submit(_work(25.0), lambda: ran.append(1))
    exc = fut.exception(10)
    assert isinstance(exc, SetupError) and exc.path == "numerics.grid"
    assert "about 25 GFLOP" in str(exc) and "limit of 10 GFLOP" in str(exc)
    assert q.submit(_work(9.0), lambda: "ok").result(10) == "ok"
    assert ran == [] and q.stats()["refused"] == 1
    q.close()


def test_heavy_jobs_leave_a_lane_for_an_ordinary_edit():
    # Before: three heavy jobs took both lanes and an edit waited for the spare lane's delay.
    q = sharing.ComputeQueue(
        workers=2, memory_budget=100, estimate=lambda s: s, spare_after=60, interactive_work=1e9
    )
    release = threading.Event()
    heavy = [q.submit(_work(5.0), lambda: release.wait(30) and "heavy") for _ in range(3)]
    assert _wait_until(lambda: q.stats()["running"] == 1)
    edit = q.submit(_work(0.1), lambda: "edit")
    assert edit.result(5) == "edit"  # long before the spare lane would open (60 s)
    assert q.stats()["heavy_running"] == 1 and not any(f.done() for f in heavy)
    release.set()
    assert [f.result(30) for f in heavy] == ["heavy"] * 3
    assert q.stats()["peak_running"] == 2
    q.close()


def test_a_cancelled_job_that_has_not_started_never_runs():
    q = sharing.ComputeQueue(workers=1, memory_budget=100, estimate=lambda s: 0, spare_after=60)
    release = threading.Event()
    first = q.submit(0, lambda: release.wait(30))
    assert _wait_until(first.running)
    stop, ran = threading.Event(), []
    second = q.submit(0, lambda: ran.append(1), cancel=stop)
    stop.set()
    release.set()
    assert isinstance(second.exception(10), Cancelled)
    assert ran == [] and q.stats()["cancelled"] == 1
    q.close()


def test_a_sum_stops_between_its_screens_when_cancelled(monkeypatch):
    setup = snapshot.from_dict(broadband_doc())
    assert incoherent.describe(setup)["components"] > 3
    stop, calls = threading.Event(), []
    real = engine.monochromatic

    def counting(*args, **kw):
        calls.append(1)
        if len(calls) == 2:
            stop.set()  # a newer request arrives while the second screen computes
        return real(*args, **kw)

    monkeypatch.setattr(engine, "monochromatic", counting)
    with cancel_scope(stop), pytest.raises(Cancelled):
        engine.compute(setup, use_cache=False)
    assert len(calls) == 2  # the third screen was never started


def test_a_newer_edit_stops_the_older_heavy_computation(monkeypatch):
    q = sharing.ComputeQueue(workers=1, spare_after=60)
    monkeypatch.setattr(sharing, "COMPUTE_QUEUE", q)
    d = Dashboard(load_preset(None))
    assert d.wait(60)
    heavy = snapshot.from_dict(broadband_doc(samples=128, wavelengths=8))
    engine.RESULT_CACHE.clear()
    d.load(heavy)
    newer = load_preset(None)
    newer.screen.distance = 1.37
    d.load(newer)  # at once: the heavy sum is outdated
    assert d.wait(300)
    assert q.stats()["cancelled"] >= 1
    assert d.result.key == snapshot.physics_hash(newer)
    assert d.last_error == ""
    q.close()


# ----------------------------------------------------------- import off the loop


class _FakeDoc:
    """Stands in for a served document: next-tick callbacks are run by the test."""

    session_context = object()

    def __init__(self) -> None:
        self.callbacks: list = []

    def add_next_tick_callback(self, fn) -> None:
        self.callbacks.append(fn)


def test_an_import_is_read_off_the_event_loop_while_the_session_shows_it(monkeypatch):
    # Before: the snapshot was parsed and checked in the calling thread (the event loop).
    q = sharing.ComputeQueue(workers=1, spare_after=60)
    monkeypatch.setattr(sharing, "COMPUTE_QUEUE", q)
    d = Dashboard(load_preset(None))
    assert d.wait(60)
    doc = _FakeDoc()
    d._doc = doc
    gate, read_on = threading.Event(), []
    real_loads = snapshot.loads

    def slow_loads(*args, **kw):
        read_on.append(threading.current_thread())
        gate.wait(10)
        return real_loads(*args, **kw)

    monkeypatch.setattr(snapshot, "loads", slow_loads)
    text = json.dumps(broadband_doc(wavelengths=1, diameter=0.0))
    assert d.import_snapshot(text, name="mine.json")  # returns while the file is read
    assert d.busy and "reading mine.json" in d.status.object
    assert _wait_until(lambda: read_on) and read_on[0] is not threading.current_thread()
    gate.set()
    assert _wait_until(lambda: doc.callbacks)
    for fn in doc.callbacks:  # the session's own tick applies the setup
        fn()
    assert d.setup.source.wavelength == 6e-7 and d.messages[-1] == ("info", "Loaded mine.json.")
    q.close()


def test_a_bad_import_read_off_the_loop_changes_nothing(monkeypatch):
    d = Dashboard(load_preset(None), threaded=False)
    before = snapshot.physics_hash(d.setup)
    doc = _FakeDoc()
    d._doc, d._threaded = doc, True
    assert d.import_snapshot('{"format": "nope"}', name="bad.json")
    assert _wait_until(lambda: doc.callbacks)
    for fn in doc.callbacks:
        fn()
    assert snapshot.physics_hash(d.setup) == before
    level, text = d.messages[-1]
    assert level == "error" and text.startswith("bad.json was not loaded:")
    assert not d.busy


# ------------------------------------------------------------ many-vertex polygons


def test_the_polygon_feature_by_kd_tree_equals_every_pair():
    rng = np.random.default_rng(14)
    for trial in range(400):
        n = int(rng.integers(3, 80))
        if trial % 3 == 0:
            v = rng.normal(size=(n, 2)) * 1e-4
        elif trial % 3 == 1:
            t = np.sort(rng.uniform(0, 2 * np.pi, n))
            r = 1e-3 * (1 + 0.5 * rng.uniform(size=n))
            v = np.c_[r * np.cos(t), r * np.sin(t)]
        else:  # repeated vertices, zero-length and collinear edges
            v = rng.integers(-3, 4, size=(n, 2)).astype(float) * 1e-4
        assert apertures._polygon_feature(v) == apertures._polygon_feature_pairwise(v)


def test_a_hundred_polygons_of_a_thousand_vertices_plan_exactly_and_fast():
    setup = snapshot.from_dict(many_polygons_doc())
    for el in setup.aperture.elements[:5]:
        v = np.asarray(el.vertices, dtype=float)
        assert apertures._polygon_feature(v) == apertures._polygon_feature_pairwise(v)
    plan = engine.check(setup)  # seconds before; the speed itself is in the benchmark
    assert plan.nx > 1000


def test_the_polygon_check_still_names_the_first_bad_vertex():
    from compute.model import Polygon

    good = [[math.cos(t) * 1e-3, math.sin(t) * 1e-3] for t in np.linspace(0, 6, 500)]
    assert Polygon(vertices=good).check() == []
    for bad in ([float("nan"), 0.0], [True, 0.0], ["1e-3", 0.0], [1e-3], [2.0e3, 0.0]):
        verts = [*good[:7], bad, *good[8:]]
        problems = Polygon(vertices=verts).check()
        assert problems and problems[0][0] == "vertices[7]", bad
    flat = [[0.0, 0.0], [1e-3, 0.0], [2e-3, 0.0]]
    assert Polygon(vertices=flat).check() == [("vertices", "the polygon has zero area")]
