"""Sweeps: vary specs, every snapshot path, grid order, executors that agree, clear errors."""

from __future__ import annotations

import csv
import io
import json
import math
import multiprocessing
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from compute import analytic, model, snapshot, sweep
from server import cli

ROOT = Path(__file__).resolve().parent.parent


def small_setup() -> model.Setup:
    """A 0.3 mm square in a 500 nm plane wave on a coarse 2 mm screen (our own numbers)."""
    return model.Setup(
        source=model.Source(wavelength=5e-7, irradiance=10.0),
        aperture=model.Aperture(elements=[model.Rect(width=3e-4, height=3e-4)]),
        screen=model.Screen(width=2e-3, height=2e-3, samples=32, distance=0.1),
        numerics=model.Numerics(precision="double"),
    )


@pytest.fixture
def snap(tmp_path) -> Path:
    path = tmp_path / "snap.json"
    snapshot.save(small_setup(), path)
    return path


def run_cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    """``python -m server.cli ARGS`` as a user runs it."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    env.pop("FRINGEBENCH_DEBUG", None)
    return subprocess.run(
        [sys.executable, "-m", "server.cli", *args],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )


# -- vary specs and paths -----------------------------------------------------------


def test_parse_vary_reads_linear_and_log_ranges():
    lin = sweep.parse_vary("screen.distance=0.5:2:4")
    assert (lin.path, lin.start, lin.stop, lin.count, lin.log) == (
        "screen.distance",
        0.5,
        2,
        4,
        False,
    )
    assert lin.values() == [0.5, 1.0, 1.5, 2.0]
    log = sweep.parse_vary("source.wavelength=4e-7:6.4e-6:5:log")
    vals = np.array(log.values())
    assert vals[0] == 4e-7 and vals[-1] == 6.4e-6  # both ends exactly
    np.testing.assert_allclose(vals[1:] / vals[:-1], 2.0, rtol=1e-12)
    assert sweep.parse_vary(" screen.x = -1e-3 : 1e-3 : 3 : lin ").values() == [-1e-3, 0.0, 1e-3]


def test_whole_number_settings_take_whole_numbers():
    plan = sweep.plan_sweep(small_setup(), ["screen.samples=20:40:3"])
    assert plan.axes == [("screen.samples", [20, 30, 40])]
    assert [snapshot.from_dict(d).screen.samples for d in plan.docs] == [20, 30, 40]
    with pytest.raises(sweep.SweepError, match="repeat"):
        sweep.plan_sweep(small_setup(), ["screen.samples=20:22:5"])


def test_every_kind_of_snapshot_path_can_be_varied():
    setup = small_setup()
    setup.aperture.elements = [
        model.Rect(width=1e-4, height=3e-4, x=-2e-4),
        model.Polygon(vertices=[[-1e-4, -1e-4], [1e-4, -1e-4], [0.0, 1e-4]]),
    ]
    varies = [
        "aperture.elements[0].x=-3e-4:-2e-4:2",
        "aperture.elements[1].vertices[2][1]=1e-4:2e-4:2",
        "screen.lens_focal_length=0.5:1:2",  # null in the base snapshot
        "source.tilt_x=0:1e-3:2",
    ]
    plan = sweep.plan_sweep(setup, varies)
    assert plan.shape == (2, 2, 2, 2) and plan.total == 16
    last = snapshot.from_dict(plan.docs[-1])
    assert last.aperture.elements[0].x == -2e-4
    assert last.aperture.elements[1].vertices[2] == [0.0, 2e-4]
    assert last.screen.lens_focal_length == 1.0
    assert last.source.tilt_x == 1e-3
    # The base setup is left as it was.
    assert setup.screen.lens_focal_length is None and setup.aperture.elements[0].x == -2e-4


def test_rows_come_in_grid_order_with_the_first_vary_outermost():
    seen = []
    rows = sweep.run_sweep(
        small_setup(),
        ["screen.distance=0.5:1:2", "source.wavelength=5e-7:6e-7:3"],
        progress=lambda p: seen.append((p.done, p.total, p.index)),
    )
    got = [(r["screen.distance"], r["source.wavelength"]) for r in rows]
    waves = np.linspace(5e-7, 6e-7, 3).tolist()
    assert got == [(d, w) for d in (0.5, 1.0) for w in waves]
    assert seen == [(k + 1, 6, k) for k in range(6)]
    assert list(rows[0]) == ["screen.distance", "source.wavelength", *sweep.METRIC_COLUMNS]


def test_distance_sweep_over_three_decades_crosses_methods():
    rows = sweep.run_sweep(small_setup(), ["screen.distance=0.005:5:4:log"])
    methods = [r["method"] for r in rows]
    assert len(set(methods)) >= 2, methods
    assert methods[-1] == "fraunhofer"  # 5 m is beyond the Fraunhofer distance 2D²/λ = 0.36 m
    for r in rows:
        assert r["error"] is None
        # Fresnel number a²/(λz), a the half-width (Goodman, Introduction to Fourier
        # Optics, 3rd ed., §4.5.1).
        expected = analytic.fresnel_number(1.5e-4, 5e-7, r["screen.distance"])
        assert math.isclose(r["fresnel_number"], float(expected), rel_tol=1e-12)
        assert r["peak_irradiance"] > 0 and r["window_power"] > 0


def test_a_point_the_engine_refuses_gets_an_error_row(snap, tmp_path, capsys):
    out = tmp_path / "grid.csv"
    code = cli.main([
        "sweep", str(snap), "--vary", "numerics.grid=16384:32768:2", "--out", str(out)
    ])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 0
    assert "warning: 2 of 2 points could not be computed" in err
    with open(out, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["numerics.grid"] for r in rows] == ["16384", "32768"]
    for r in rows:
        assert r["error"].startswith("numerics.grid:") and "GiB" in r["error"]
        assert r["peak_irradiance"] == "" and r["method"] == ""


def test_cancel_stops_between_points_and_keeps_the_finished_ones():
    done = []
    with pytest.raises(sweep.Cancelled) as info:
        sweep.run_sweep(
            small_setup(),
            ["screen.distance=0.5:2:6"],
            progress=lambda p: done.append(p.index),
            cancel=lambda: len(done) >= 2,
        )
    assert done == [0, 1]
    assert [k for k, _ in info.value.rows] == [0, 1]
    assert info.value.rows[1][1]["screen.distance"] == np.linspace(0.5, 2, 6)[1]


# -- bad input --------------------------------------------------------------------------

BAD_VARY = [
    ("unknown path", "screen.distnce=0.1:1:3", "screen.distnce", "unknown setting 'distnce'"),
    ("unknown section", "camera.gain=1:2:3", "camera.gain", "unknown section 'camera'"),
    (
        "index out of range",
        "aperture.elements[4].width=1e-4:2e-4:2",
        "aperture.elements[4]",
        "range",
    ),
    ("not a number", "numerics.method=1:2:3", "numerics.method", "not a number"),
    ("a group", "screen=1:2:3", "screen", "group of settings"),
    ("empty range", "screen.distance=1:1:3", "screen.distance", "empty"),
    ("reversed range", "screen.distance=2:1:3", "screen.distance", "reversed"),
    ("count of one", "screen.distance=1:2:1", "screen.distance", "COUNT"),
    ("count not whole", "screen.distance=1:2:2.5", "screen.distance", "COUNT"),
    ("count not a number", "screen.distance=1:2:many", "screen.distance", "COUNT"),
    ("count too large", "screen.distance=1:2:20000", "screen.distance", "COUNT"),
    ("start not a number", "screen.distance=near:2:3", "screen.distance", "START"),
    ("stop infinite", "screen.distance=1:inf:3", "screen.distance", "STOP"),
    ("log from zero", "screen.x=0:1e-3:3:log", "screen.x", "log range needs START > 0"),
    ("bad spacing", "screen.distance=1:2:3:cubic", "screen.distance", "'lin' or 'log'"),
    ("no equals sign", "screen.distance", "screen.distance", "PATH=START:STOP:COUNT"),
    ("bad path syntax", "screen..distance=1:2:3", "screen..distance", "not a snapshot path"),
    ("out of the model's range", "screen.distance=0:1:3", "screen.distance", "expected a number"),
    ("a rule of the model", "screen.height=1e-3:100:2", "screen.height", "pixel rows"),
]


@pytest.mark.parametrize(
    ("spec", "what", "fragment"), [c[1:] for c in BAD_VARY], ids=[c[0] for c in BAD_VARY]
)
def test_bad_vary_exits_2_naming_it_and_writes_nothing(
    snap, tmp_path, capsys, spec, what, fragment
):
    out = tmp_path / "out.csv"
    code = cli.main(["sweep", str(snap), "--vary", spec, "--out", str(out)])
    err = capsys.readouterr().err
    first = err.splitlines()[0]
    assert code == 2
    assert first.startswith(f"error: --vary {what}"), first
    assert fragment in first
    assert "Traceback" not in err
    assert not out.exists()


def test_cross_rule_names_the_rule_and_the_values(tmp_path, capsys):
    setup = small_setup()
    setup.aperture.elements = [model.Annulus(diameter=1e-3, inner_diameter=4e-4)]
    path = tmp_path / "ring.json"
    snapshot.save(setup, path)
    code = cli.main([
        "sweep", str(path), "--vary", "aperture.elements[0].diameter=6e-4:1e-3:2",
        "--vary", "aperture.elements[0].inner_diameter=4e-4:8e-4:2",
        "--out", str(tmp_path / "r.csv"),
    ])  # fmt: skip
    first = capsys.readouterr().err.splitlines()[0]
    assert code == 2
    # Each axis alone is fine; the combination 6e-4 outer, 8e-4 inner is not.
    assert first.startswith(
        "error: --vary aperture.elements[0].diameter, aperture.elements[0].inner_diameter: "
        "at aperture.elements[0].diameter = 0.0006, aperture.elements[0].inner_diameter = 0.0008"
    ), first
    assert "must be smaller than" in first


def test_same_path_twice_is_refused(snap, tmp_path, capsys):
    code = cli.main([
        "sweep", str(snap), "--vary", "screen.distance=1:2:2", "--vary", "screen.distance=3:4:2",
        "--out", str(tmp_path / "o.csv"),
    ])  # fmt: skip
    assert code == 2
    assert "varied twice" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (["--out", "o.txt"], "error: --out: expected a file name ending in .csv"),
        (["--out", "no/such/dir/o.csv"], "error: --out: directory"),
        (["--out", "o.csv", "--workers", "0"], "error: argument --workers"),
        (["--out", "o.csv", "--workers", "2", "--scheduler", "tcp://127.0.0.1:1"], "not allowed"),
    ],
    ids=["not csv", "no directory", "zero workers", "both executors"],
)
def test_bad_output_or_executor_is_refused(snap, tmp_path, capsys, monkeypatch, args, fragment):
    monkeypatch.chdir(tmp_path)
    code = cli.main(["sweep", str(snap), "--vary", "screen.distance=1:2:2", *args])
    assert code == 2
    assert fragment in capsys.readouterr().err


def test_bad_snapshot_is_reported_with_its_path(tmp_path, capsys):
    path = tmp_path / "bad.json"
    doc = snapshot.to_dict(small_setup())
    doc["screen"]["samples"] = "many"
    path.write_text(json.dumps(doc))
    code = cli.main(["sweep", str(path), "--vary", "screen.distance=1:2:2", "--out", "x.csv"])
    assert code == 2
    assert capsys.readouterr().err.startswith("error: screen.samples: expected an integer")


def test_unreachable_scheduler_is_bad_input(snap, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(sweep, "CONNECT_TIMEOUT_S", 1.0)
    with socket.socket() as s:  # a free port on loopback with nothing listening
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    out = tmp_path / "o.csv"
    code = cli.main([
        "sweep", str(snap), "--vary", "screen.distance=1:2:2", "--out", str(out),
        "--scheduler", f"tcp://127.0.0.1:{port}",
    ])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2
    assert f"error: --scheduler: cannot reach a Dask scheduler at tcp://127.0.0.1:{port}" in err
    assert not out.exists()


def test_help_explains_the_spec_with_examples(capsys):
    assert cli.main(["sweep", "--help"]) == 0
    text = capsys.readouterr().out
    assert "PATH=START:STOP:COUNT[:log]" in text and "fringebench sweep" in text
    assert "--workers N" in text and "--scheduler ADDRESS" in text


def test_a_user_sees_one_error_line_and_no_traceback(snap, tmp_path):
    proc = run_cli(
        "sweep", str(snap), "--vary", "screen.distance=5:1:3", "--out", "o.csv", cwd=tmp_path
    )
    assert proc.returncode == 2
    assert proc.stderr == (
        "error: --vary screen.distance: the range is reversed: START 5 is above STOP 1; "
        "write the smaller value first\n"
    )
    assert not (tmp_path / "o.csv").exists()


# -- executors ----------------------------------------------------------------------------


def _kill_group(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=15)


@pytest.fixture(scope="module")
def dask_scheduler(tmp_path_factory):
    """A Dask scheduler and one single-threaded worker on 127.0.0.1, torn down at the end."""
    from distributed import Client

    where = tmp_path_factory.mktemp("dask")
    info = where / "scheduler.json"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    dask = str(Path(sys.executable).parent / "dask")
    common = {"cwd": where, "env": env, "start_new_session": True}
    quiet = {"stdout": subprocess.DEVNULL, "stderr": subprocess.DEVNULL}
    procs = []
    try:
        procs.append(
            subprocess.Popen(
                [dask, "scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                 "--scheduler-file", str(info)],
                **common, **quiet,
            )
        )  # fmt: skip
        deadline = time.monotonic() + 60
        while not (info.exists() and info.read_text().strip()):
            assert procs[0].poll() is None, "the Dask scheduler did not start"
            assert time.monotonic() < deadline, "the Dask scheduler wrote no address"
            time.sleep(0.1)
        address = json.loads(info.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        procs.append(
            subprocess.Popen(
                [dask, "worker", "--scheduler-file", str(info), "--host", "127.0.0.1",
                 "--nthreads", "1", "--nworkers", "1", "--no-dashboard",
                 "--local-directory", str(where)],
                **common, **quiet,
            )
        )  # fmt: skip
        with Client(address, timeout=30) as client:
            client.wait_for_workers(1, timeout=60)
        yield address
    finally:
        for proc in reversed(procs):
            _kill_group(proc)


def test_serial_local_workers_and_a_scheduler_give_identical_csvs(snap, tmp_path, dask_scheduler):
    vary = [
        "--vary",
        "screen.distance=0.005:5:4:log",
        "--vary",
        "aperture.elements[0].width=2e-4:3e-4:2",
    ]
    runs = {
        "serial": [],
        "workers": ["--workers", "2"],
        "scheduler": ["--scheduler", dask_scheduler],
    }
    texts = {}
    for name, extra in runs.items():
        proc = run_cli("sweep", str(snap), *vary, "--out", f"{name}.csv", *extra, cwd=tmp_path)
        assert proc.returncode == 0, proc.stderr
        assert "sweep: 8/8 points (100 %)" in proc.stderr  # progress on stderr
        assert "Traceback" not in proc.stderr
        texts[name] = (tmp_path / f"{name}.csv").read_text()
    assert texts["workers"] == texts["serial"]
    assert texts["scheduler"] == texts["serial"]
    rows = list(csv.DictReader(io.StringIO(texts["serial"])))
    assert len(rows) == 8
    assert {"screen.distance", "aperture.elements[0].width", "fresnel_number"} <= set(rows[0])
    assert {"peak_irradiance", "method"} <= set(rows[0])
    # The CSV numbers read back to the very numbers computed in this process.
    direct = sweep.run_sweep(small_setup(), [v for v in vary if v != "--vary"])
    for text_row, row in zip(rows, direct, strict=True):
        assert float(text_row["peak_irradiance"]) == row["peak_irradiance"]
        assert float(text_row["fresnel_number"]) == row["fresnel_number"]
        assert text_row["method"] == row["method"]


def test_local_workers_fork_only_from_a_process_without_other_threads():
    # A fork copies only the calling thread and any lock another thread holds
    # (POSIX fork(2), common practice, no source), so a threaded process spawns.
    code = "from compute import sweep; print(sweep._worker_start_method())"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    alone = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True
    )
    assert alone.stdout.strip() == "fork"
    release = threading.Event()
    other = threading.Thread(target=release.wait)
    other.start()
    try:
        assert sweep._worker_start_method() == "spawn"
    finally:
        release.set()
        other.join()


def test_cancel_on_local_workers_shuts_them_down():
    with pytest.raises(sweep.Cancelled):
        sweep.run_sweep(small_setup(), ["screen.distance=0.5:2:8"], workers=2, cancel=lambda: True)
    assert not multiprocessing.active_children()


def test_cancel_on_a_scheduler_stops_the_sweep(dask_scheduler):
    done = []
    with pytest.raises(sweep.Cancelled) as info:
        sweep.run_sweep(
            small_setup(),
            ["screen.distance=0.5:2:40"],
            scheduler=dask_scheduler,
            progress=lambda p: done.append(p.index),
            cancel=lambda: len(done) >= 1,
        )
    assert 1 <= len(info.value.rows) < 40
    assert [k for k, _ in info.value.rows] == sorted(done)
