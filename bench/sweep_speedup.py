"""Benchmark: speed-up of a 64-point sweep on two local Dask workers over the serial run.

The sweep is the Talbot-grating preset over 64 screen distances from 5 mm to 30 mm
(the angular-spectrum near field), once in the preset's single precision and once
in double precision, whose points cost about twice as much. Each is timed five
ways in one run on this machine:

* serial, as ``fringebench sweep`` runs by default, and ``--workers 2`` (a local
  cluster of two single-threaded processes, its start and shutdown included),
  each in a fresh process as the command line runs them (with no other threads
  there, the workers start by fork); the speed-up compares these two;
* serial in this process (its caches of plans and imports warm), and, to show
  how much of the machine that already uses, serial with one FFT thread;
* on an already running two-worker cluster (``--scheduler``), which leaves only
  the computing and the traffic.

Every run starts with empty kernel caches, so none profits from an earlier one.
The ways take turns for ``--repeat`` rounds and each figure is the best of
its runs, so that all see the machine in its quietest moments; the rows of every
run must be identical. The machine may be shared: the load average is printed
with every run. A benchmark, not a test: nothing here passes or fails.

    .venv/bin/python bench/sweep_speedup.py [--repeat 2] [--points 64] [--precision single]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from compute import engine, snapshot, sweep  # noqa: E402
from compute import fft as _fft  # noqa: E402

PRESET = ROOT / "presets" / "talbot-grating.json"


def _clear_caches() -> None:
    engine.KERNEL_CACHE.clear()
    engine.RESULT_CACHE.clear()


def _one_fft_thread(plan: sweep.SweepPlan) -> list:
    saved = _fft.WORKERS
    _fft.WORKERS = 1
    try:
        return sweep.run_plan(plan)
    finally:
        _fft.WORKERS = saved


_FRESH = """
import json, sys, time
sys.path.insert(0, {root!r})
from compute import snapshot, sweep
setup = snapshot.load({preset!r})
setup.numerics.precision = {precision!r}
plan = sweep.plan_sweep(setup, [{vary!r}])
t0 = time.perf_counter()
rows = sweep.run_plan(plan, workers={workers!r})
print(json.dumps({{"seconds": time.perf_counter() - t0, "rows": rows}}))
"""


def _in_fresh_process(precision: str, vary: str, workers: int | None) -> tuple[float, list]:
    """A sweep as the command line runs it: a new process with no other threads.

    ``workers`` None is the serial default, 2 is ``--workers 2``. Timed inside that
    process from the call on, like the other ways (the interpreter's own start and
    imports are left out of every way).
    """
    code = _FRESH.format(
        root=str(ROOT), preset=str(PRESET), precision=precision, vary=vary, workers=workers
    )
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT
    )
    report = json.loads(done.stdout.strip().splitlines()[-1])
    return report["seconds"], report["rows"]


def bench_one(
    plan: sweep.SweepPlan, label: str, repeat: int, client, address: str, vary: str
) -> None:
    fresh: dict[str, float] = {}

    def in_fresh_process(workers: int | None) -> list:
        seconds, rows = _in_fresh_process(label, vary, workers)
        fresh["seconds"] = seconds
        return rows

    ways = {
        "serial, fresh process": lambda: in_fresh_process(None),
        "--workers 2 (start included)": lambda: in_fresh_process(2),
        "serial, this process": lambda: sweep.run_plan(plan),
        "serial, one FFT thread": lambda: _one_fft_thread(plan),
        "2 running workers": lambda: sweep.run_plan(plan, scheduler=address),
    }
    times: dict[str, list[float]] = {name: [] for name in ways}
    reference = None
    for r in range(repeat):
        for name, run in ways.items():
            _clear_caches()
            client.run(_clear_caches)
            load = os.getloadavg()[0]
            t0 = time.perf_counter()
            rows = run()
            times[name].append(fresh.pop("seconds", time.perf_counter() - t0))
            if reference is None:
                reference = json.loads(json.dumps(rows))  # as the fresh process reports them
            elif json.loads(json.dumps(rows)) != reference:
                raise SystemExit(f"{label}, {name}: the rows differ from the first run")
            print(f"{label}  round {r + 1}  {name:<30} {times[name][-1]:7.2f} s  (load {load:.2f})")
    best = {name: min(t) for name, t in times.items()}
    fresh_serial, cold, serial, single, warm = (best[n] for n in ways)
    print(
        f"{label}: as the command line runs them, serial {fresh_serial:.2f} s and --workers 2 "
        f"{cold:.2f} s: speed-up {fresh_serial / cold:.2f}×. In this process: serial "
        f"{serial:.2f} s (one FFT thread {single:.2f} s), running workers {warm:.2f} s "
        f"({serial / warm:.2f}×, {single / warm:.2f}× over one thread); rows identical in "
        "every run"
    )


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=2, help="rounds (default 2)")
    parser.add_argument("--points", type=int, default=64, help="points of the sweep (default 64)")
    parser.add_argument(
        "--precision",
        choices=["single", "double", "both"],
        default="both",
        help="which sweep (default both)",
    )
    args = parser.parse_args()

    print(f"sweep: {args.points} points of {PRESET.name}, screen.distance 5 mm to 30 mm")
    print(f"machine: {os.cpu_count()} CPUs")
    # The very cluster that --workers starts, kept running for the third way.
    cluster, client = sweep._start_local_cluster(2)
    with cluster, client:
        address = cluster.scheduler_address
        chosen = ("single", "double") if args.precision == "both" else (args.precision,)
        for precision in chosen:
            setup = snapshot.load(PRESET)
            setup.numerics.precision = precision
            vary = f"screen.distance=0.005:0.03:{args.points}"
            plan = sweep.plan_sweep(setup, [vary])
            # Warm up the running workers: imports, and one FFT thread each.
            client.gather(client.map(sweep.compute_point, plan.docs[:2], pure=False, fft_threads=1))
            bench_one(plan, precision, args.repeat, client, address, vary)
    return 0


if __name__ == "__main__":
    sys.exit(main())
