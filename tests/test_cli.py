"""The ``fringebench`` command line: render, check and serve, good and bad input."""

from __future__ import annotations

import base64
import csv
import io
import json
import os
import resource
import subprocess
import sys
import types
from pathlib import Path

import numpy as np
import pytest
from PIL import Image as PILImage

import server
from compute import snapshot
from server import cli

ROOT = Path(__file__).resolve().parent.parent


def run_cli(*args: str, cwd: Path, env: dict | None = None, preexec_fn=None, timeout: float = 300):
    """Run ``python -m server.cli ARGS`` as a user would, from ``cwd``."""
    full_env = dict(os.environ, PYTHONPATH=str(ROOT))
    full_env.pop("FRINGEBENCH_DEBUG", None)
    full_env.update(env or {})
    return subprocess.run(
        [sys.executable, "-m", "server.cli", *args],
        cwd=cwd,
        env=full_env,
        capture_output=True,
        text=True,
        timeout=timeout,
        preexec_fn=preexec_fn,
    )


def small_doc() -> dict:
    """A quick single-slit snapshot (our own numbers)."""
    return {
        "format": "fringebench-snapshot",
        "version": 1,
        "meta": {"title": "CLI test slit"},
        "source": {"kind": "plane", "wavelength": 6e-7, "irradiance": 10.0},
        "aperture": {
            "background": "opaque",
            "elements": [{"shape": "rect", "x": 0.0, "y": 0.0, "width": 1e-4, "height": 5e-4}],
        },
        "screen": {"distance": 1.0, "width": 0.02, "height": 0.01, "samples": 60},
        "numerics": {"method": "auto", "grid": 0, "precision": "double"},
        "view": {"scale": "log"},
    }


def _png_url(width: int, height: int) -> str:
    buf = io.BytesIO()
    PILImage.new("L", (width, height), 128).save(buf, format="PNG")
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _with(mutate):
    def make(path: Path) -> None:
        doc = small_doc()
        mutate(doc)
        path.write_text(json.dumps(doc, allow_nan=True))

    return make


def _text(text: str):
    def make(path: Path) -> None:
        path.write_text(text)

    return make


def _image(data: str):
    def mutate(doc):
        doc["aperture"]["elements"] = [
            {"shape": "image", "x": 0.0, "y": 0.0, "width": 1e-3, "height": 1e-3, "data": data}
        ]

    return _with(mutate)


def _big_file(path: Path) -> None:
    text = json.dumps(small_doc())
    path.write_text(text + " " * (snapshot.MAX_SNAPSHOT_BYTES + 10 - len(text)))


def _missing(path: Path) -> None:
    pass  # nothing is written: the file does not exist


_NOT_PNG = "data:image/png;base64," + base64.b64encode(b"JFIF" + bytes(64)).decode("ascii")

# (id, make the snapshot file at a path, text that the first error line holds)
BAD_INPUT = [
    ("malformed json", _text('{"format": "fringebench-snapshot", "version": 1,'), "malformed JSON"),
    ("not an object", _text("[1, 2, 3]"), "expected a JSON object"),
    ("unknown key", _with(lambda d: d["screen"].update(colour="red")), "screen.colour"),
    (
        "wrong type",
        _with(lambda d: d["aperture"]["elements"][0].update(width="wide")),
        "aperture.elements[0].width",
    ),
    ("out of range", _with(lambda d: d["source"].update(wavelength=-5e-7)), "source.wavelength"),
    ("nan", _with(lambda d: d["screen"].update(distance=float("nan"))), "screen.distance"),
    (
        "unknown shape",
        _with(lambda d: d["aperture"]["elements"][0].update(shape="star")),
        "aperture.elements[0].shape",
    ),
    ("missing required key", _with(lambda d: d["screen"].pop("samples")), "screen.samples"),
    ("newer version", _with(lambda d: d.update(version=7)), "version"),
    ("grid over memory", _with(lambda d: d["numerics"].update(grid=32768)), "numerics.grid"),
    ("missing file", _missing, "no such file"),
    ("over 5 MB", _big_file, "5 MB"),
    ("image not png", _image(_NOT_PNG), "aperture.elements[0].data"),
    ("image over pixel cap", _image(_png_url(4096, 1100)), "aperture.elements[0].data"),
]


@pytest.mark.parametrize("command", ["render", "check"])
@pytest.mark.parametrize(
    ("make", "expected"), [c[1:] for c in BAD_INPUT], ids=[c[0] for c in BAD_INPUT]
)
def test_bad_input_exits_2_with_a_clear_error_and_writes_nothing(tmp_path, command, make, expected):
    snap = tmp_path / "snap.json"
    make(snap)
    before = sorted(p.name for p in tmp_path.iterdir())
    args = [command, str(snap)]
    if command == "render":
        args += ["--out", "r.npz", "--png", "m.png", "--csv", "c.csv"]
    proc = run_cli(*args, cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    first = proc.stderr.splitlines()[0]
    assert first.startswith("error: ")
    assert expected in first
    assert "Traceback" not in proc.stderr
    assert all(line.startswith("error: ") for line in proc.stderr.splitlines())
    assert proc.stdout == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # nothing written


def test_several_errors_come_on_several_lines(tmp_path):
    doc = small_doc()
    doc["screen"]["distance"] = -1
    doc["aperture"]["elements"][0]["height"] = "tall"
    snap = tmp_path / "s.json"
    snap.write_text(json.dumps(doc))
    proc = run_cli("check", str(snap), cwd=tmp_path)
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    assert len(lines) == 2
    assert lines[0].startswith("error: aperture.elements[0].height: ")
    assert lines[1].startswith("error: screen.distance: ")


def test_grid_over_memory_is_refused_before_allocating(tmp_path):
    # Under a 1.5 GiB address-space cap a 24 GiB allocation would end in MemoryError
    # (exit 1); the planner must refuse first (exit 2).
    doc = small_doc()
    doc["numerics"]["grid"] = 32768
    snap = tmp_path / "s.json"
    snap.write_text(json.dumps(doc))

    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (1536 * 2**20, 1536 * 2**20))

    proc = run_cli("render", str(snap), "--out", "r.npz", cwd=tmp_path, preexec_fn=cap)
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr.startswith("error: numerics.grid: ")
    assert not (tmp_path / "r.npz").exists()


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """One render of the small snapshot with every output, shared by the checks below."""
    tmp = tmp_path_factory.mktemp("render")
    snap = tmp / "slit.json"
    snap.write_text(json.dumps(small_doc()))
    args = ["render", str(snap), "--out", "r.npz", "--field", "--png", "m.png", "--csv", "c.csv"]
    proc = run_cli(*args, cwd=tmp)
    assert proc.returncode == 0, proc.stderr
    return tmp, proc


def test_render_writes_the_npz_as_the_format_says(rendered):
    tmp, proc = rendered
    setup = snapshot.load(tmp / "slit.json")
    ny, nx = setup.screen.shape_px()
    with np.load(tmp / "r.npz", allow_pickle=False) as npz:
        assert set(npz.files) == {"x", "y", "intensity", "meta", "field"}
        x, y, intensity, field, meta = (npz[k] for k in ("x", "y", "intensity", "field", "meta"))
    assert x.shape == (nx,) and y.shape == (ny,) and intensity.shape == (ny, nx)
    assert x.dtype == y.dtype == intensity.dtype == np.float64
    assert field.shape == (ny, nx) and np.iscomplexobj(field)
    np.testing.assert_allclose(np.abs(field) ** 2, intensity, rtol=1e-9, atol=0)
    assert np.all(np.isfinite(intensity)) and intensity.min() >= 0 and intensity.max() > 0
    assert np.all(np.diff(x) > 0) and np.all(np.diff(y) > 0)
    assert meta.shape == () and meta.dtype.kind == "U"
    info = json.loads(meta.item())
    for key in ("method", "fresnel_number", "grid", "pitch", "validity", "app_version"):
        assert key in info, key
    assert info["snapshot_sha256"] == snapshot.physics_hash(setup)
    assert info["elapsed_s"] >= 0
    assert all(item["verdict"] in ("ok", "marginal", "invalid") for item in info["validity"])
    assert "wrote r.npz" in proc.stdout


def test_render_without_field_has_exactly_four_keys(tmp_path):
    snap = tmp_path / "slit.json"
    snap.write_text(json.dumps(small_doc()))
    proc = run_cli("render", str(snap), "--out", "r.npz", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    with np.load(tmp_path / "r.npz", allow_pickle=False) as npz:
        assert sorted(npz.files) == ["intensity", "meta", "x", "y"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.npz", "slit.json"]


def test_render_png_is_a_colour_map_picture(rendered):
    tmp, _ = rendered
    with PILImage.open(tmp / "m.png") as img:
        assert img.format == "PNG" and img.mode == "RGB"
        pixels = np.asarray(img)
    assert img.size[0] > 300 and img.size[1] > 100
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 50  # a ramp, not a blank


def test_render_csv_holds_both_cuts_through_the_centre(rendered):
    tmp, _ = rendered
    with np.load(tmp / "r.npz") as npz:
        x, y, intensity = npz["x"], npz["y"], npz["intensity"]
    rows = list(csv.reader((tmp / "c.csv").open()))
    assert rows[0] == ["cut", "x_mm", "y_mm", "irradiance_W_per_m2"]
    horizontal = np.array([[float(v) for v in r[1:]] for r in rows[1:] if r[0] == "horizontal"])
    vertical = np.array([[float(v) for v in r[1:]] for r in rows[1:] if r[0] == "vertical"])
    assert len(rows) == 1 + x.size + y.size
    j = int(np.argmin(np.abs(y)))  # window centre is (0, 0) in this snapshot
    i = int(np.argmin(np.abs(x)))
    np.testing.assert_array_equal(horizontal[:, 0], x * 1e3)
    np.testing.assert_array_equal(horizontal[:, 1], np.full(x.size, y[j] * 1e3))
    np.testing.assert_array_equal(horizontal[:, 2], intensity[j, :])
    np.testing.assert_array_equal(vertical[:, 1], y * 1e3)
    np.testing.assert_array_equal(vertical[:, 2], intensity[:, i])


@pytest.mark.parametrize(
    ("option", "value", "fragment"),
    [
        ("--out", "result.txt", "ending in .npz"),
        ("--out", "no/such/dir/r.npz", "does not exist"),
        ("--png", "map.jpg", "ending in .png"),
        ("--csv", "cuts.npz", "ending in .csv"),
    ],
)
def test_render_refuses_bad_output_paths_before_computing(tmp_path, option, value, fragment):
    snap = tmp_path / "slit.json"
    snap.write_text(json.dumps(small_doc()))
    args = ["render", str(snap), "--out", "r.npz"]
    if option == "--out":
        args = ["render", str(snap), "--out", value]
    else:
        args += [option, value]
    proc = run_cli(*args, cwd=tmp_path)
    assert proc.returncode == 2
    assert proc.stderr.startswith(f"error: {option}: ") and fragment in proc.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["slit.json"]


def test_check_prints_the_validity_report(tmp_path):
    snap = tmp_path / "slit.json"
    snap.write_text(json.dumps(small_doc()))
    proc = run_cli("check", str(snap), cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "Fresnel number" in proc.stdout
    assert "laser-safety" in proc.stdout
    report = json.loads(run_cli("check", str(snap), "--json", cwd=tmp_path).stdout)
    for item in report["validity"]:
        assert item["sentence"] in proc.stdout
    assert not (tmp_path / "r.npz").exists()


def test_check_json_has_fresnel_number_and_verdicts(tmp_path):
    snap = tmp_path / "slit.json"
    snap.write_text(json.dumps(small_doc()))
    proc = run_cli("check", str(snap), "--json", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    report = json.loads(proc.stdout)
    # Fresnel number a²/(λz) with a the half-width of the opening (Goodman, Introduction
    # to Fourier Optics, 3rd ed., §4.5.1): here a = 50 µm, λ = 600 nm, z = 1 m.
    assert isinstance(report["fresnel_number"], float) and report["fresnel_number"] > 0
    assert report["snapshot_sha256"] == snapshot.physics_hash(snapshot.load(snap))
    assert report["method"] in ("fraunhofer", "fresnel", "angular_spectrum", "rayleigh_sommerfeld")
    assert report["validity"]
    for item in report["validity"]:
        assert item["verdict"] in ("ok", "marginal", "invalid")
        assert {"key", "label", "value", "limit", "unit", "sentence"} <= set(item)


@pytest.mark.parametrize("command", ["render", "check", "serve"])
def test_help_of_each_command_has_an_example(command, tmp_path):
    proc = run_cli(command, "--help", cwd=tmp_path)
    assert proc.returncode == 0
    assert "example:" in proc.stdout and f"fringebench {command}" in proc.stdout


def test_top_level_help_lists_the_commands(tmp_path):
    proc = run_cli("--help", cwd=tmp_path)
    assert proc.returncode == 0
    for command in ("render", "check", "serve"):
        assert command in proc.stdout


@pytest.mark.parametrize(
    "args",
    [["render", "x.json"], [], ["frobnicate"], ["check"], ["serve", "--port", "seventy"]],
    ids=["render without --out", "no command", "unknown command", "check without file", "port"],
)
def test_usage_errors_exit_2_with_an_error_line(args, tmp_path):
    proc = run_cli(*args, cwd=tmp_path)
    assert proc.returncode == 2
    assert proc.stderr.startswith("error: ")
    assert "Traceback" not in proc.stderr


# -- in-process checks: internal failure and serve ----------------------------------------


def _boom(*args, **kwargs):
    raise RuntimeError("the propagator fell over\nsecond line")


def test_internal_failure_is_one_line_without_traceback(tmp_path, monkeypatch, capsys):
    from compute import engine

    snap = tmp_path / "slit.json"
    snap.write_text(json.dumps(small_doc()))
    monkeypatch.setattr(engine, "compute", _boom)
    monkeypatch.delenv("FRINGEBENCH_DEBUG", raising=False)
    code = cli.main(["render", str(snap), "--out", str(tmp_path / "r.npz")])
    err = capsys.readouterr().err
    assert code == 1
    assert err == "error: internal failure: RuntimeError: the propagator fell over second line\n"
    assert not (tmp_path / "r.npz").exists()


def test_internal_failure_shows_traceback_with_debug(tmp_path, monkeypatch, capsys):
    from compute import engine

    snap = tmp_path / "slit.json"
    snap.write_text(json.dumps(small_doc()))
    monkeypatch.setattr(engine, "check", _boom)
    monkeypatch.setenv("FRINGEBENCH_DEBUG", "1")
    code = cli.main(["check", str(snap)])
    err = capsys.readouterr().err
    assert code == 1
    assert err.startswith("error: internal failure: RuntimeError")
    assert "Traceback (most recent call last)" in err


@pytest.fixture
def fake_serving(monkeypatch):
    """Stand in for server.serving: record the options instead of starting a server."""
    calls = []

    class ServeError(Exception):
        pass

    def serve(**options):
        calls.append(options)
        if options.get("port") == 1:
            raise ServeError("port 1 is in use; choose another with --port")

    fake = types.SimpleNamespace(serve=serve, ServeError=ServeError)
    monkeypatch.setitem(sys.modules, "server.serving", fake)
    monkeypatch.setattr(server, "serving", fake, raising=False)
    return calls


def test_serve_passes_the_defaults(fake_serving):
    assert cli.main(["serve"]) == 0
    assert fake_serving == [
        {
            "port": 5006,
            "preset": None,
            "open": False,
            "share": False,
            "password": None,
            "password_file": None,
            "address": None,
            "max_sessions": 16,
            "max_work": None,
        }
    ]


def test_serve_passes_every_option(fake_serving):
    args = ["serve", "--port", "8123", "--preset", "knife-edge", "--open", "--share"]
    args += ["--password-file", "pw.txt", "--address", "0.0.0.0", "--max-sessions", "4"]
    args += ["--max-work", "50"]
    assert cli.main(args) == 0
    assert fake_serving[-1] == {
        "port": 8123,
        "preset": "knife-edge",
        "open": True,
        "share": True,
        "password": None,
        "password_file": "pw.txt",
        "address": "0.0.0.0",
        "max_sessions": 4,
        "max_work": 50.0,
    }


def test_serve_default_session_limit_is_the_servers():
    from server import serving

    parser = cli.build_parser()
    assert parser.parse_args(["serve"]).max_sessions == serving.DEFAULT_MAX_SESSIONS


@pytest.mark.parametrize("value", ["0", "-3", "many"])
def test_serve_max_sessions_must_be_a_positive_whole_number(fake_serving, capsys, value):
    assert cli.main(["serve", "--max-sessions", value]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: argument --max-sessions")
    assert fake_serving == []


def test_serve_password_options_exclude_each_other(fake_serving, capsys):
    assert cli.main(["serve", "--password", "a", "--password-file", "b"]) == 2
    assert capsys.readouterr().err.startswith("error: argument --password-file")
    assert fake_serving == []


def test_serve_errors_are_bad_input(fake_serving, capsys):
    assert cli.main(["serve", "--port", "1"]) == 2
    assert capsys.readouterr().err == "error: port 1 is in use; choose another with --port\n"


@pytest.mark.parametrize("port", ["-1", "65536"])
def test_serve_port_range(fake_serving, capsys, port):
    assert cli.main(["serve", "--port", port]) == 2
    assert "port number" in capsys.readouterr().err
    assert fake_serving == []


# -- files that are not regular files; the mode of written files ------------------------


@pytest.mark.parametrize(
    "command",
    [
        ["check", "{f}"],
        ["check", "{f}", "--json"],
        ["render", "{f}", "--out", "r.npz"],
        ["sweep", "{f}", "--vary", "screen.distance=0.5:1:2", "--out", "s.csv"],
        ["serve", "--preset", "{f}", "--port", "0"],
    ],
    ids=["check", "check-json", "render", "sweep", "serve-preset"],
)
def test_a_fifo_is_refused_at_once_with_exit_2(tmp_path, command):
    # Before the fix, reading a FIFO with no writer blocked forever (the timeout fails it).
    fifo = tmp_path / "pipe.json"
    os.mkfifo(fifo)
    args = [a.replace("{f}", str(fifo)) for a in command]
    proc = run_cli(*args, cwd=tmp_path, timeout=60)
    assert proc.returncode == 2, proc.stderr
    first = proc.stderr.splitlines()[0]
    assert first.startswith("error: ") and str(fifo) in first
    assert "not a regular file" in first
    assert "Traceback" not in proc.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["pipe.json"]  # nothing written


def test_a_character_device_is_refused_with_exit_2(tmp_path):
    proc = run_cli("check", "/dev/zero", cwd=tmp_path, timeout=60)
    assert proc.returncode == 2
    assert proc.stderr.startswith("error: /dev/zero: ") and "not a regular file" in proc.stderr


@pytest.mark.parametrize("mask", [0o022, 0o002, 0o077])
def test_render_and_sweep_outputs_honour_the_umask(tmp_path, mask):
    # Before the fix every output was 0600 (mkstemp's mode) whatever the umask.
    snap = tmp_path / "slit.json"
    snap.write_text(json.dumps(small_doc()))

    def set_mask():
        os.umask(mask)

    args = ["render", str(snap), "--out", "r.npz", "--png", "m.png", "--csv", "c.csv"]
    proc = run_cli(*args, cwd=tmp_path, preexec_fn=set_mask)
    assert proc.returncode == 0, proc.stderr
    sweep = ["sweep", str(snap), "--vary", "screen.distance=0.5:1:2"]
    proc = run_cli(*sweep, "--out", "s.csv", cwd=tmp_path, preexec_fn=set_mask)
    assert proc.returncode == 0, proc.stderr
    for name in ("r.npz", "m.png", "c.csv", "s.csv"):
        assert (tmp_path / name).stat().st_mode & 0o777 == 0o666 & ~mask, name


def test_snapshot_save_honours_the_umask(tmp_path):
    old = os.umask(0o027)
    try:
        snapshot.save(snapshot.from_dict(small_doc()), tmp_path / "s.json")
    finally:
        os.umask(old)
    assert (tmp_path / "s.json").stat().st_mode & 0o777 == 0o640


@pytest.mark.parametrize("value", ["0", "-5", "nan", "inf", "lots"])
def test_serve_max_work_must_be_a_positive_number(fake_serving, capsys, value):
    assert cli.main(["serve", "--max-work", value]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: argument --max-work:") and fake_serving == []
