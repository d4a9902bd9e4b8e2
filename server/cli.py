"""The ``fringebench`` command: ``render`` and ``check`` a snapshot, ``serve`` the dashboard.

Exit codes: 0 done; 2 bad input (every stderr line starts with ``error:``, the
first names the field, nothing is written); 3 the result's verdict is invalid and
``--strict`` was given (``render`` writes nothing; ``check`` prints its report);
1 an internal failure (one line, ``error: internal failure: ...``; the traceback
only with ``FRINGEBENCH_DEBUG=1``).
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import os
import sys
import tempfile
import traceback
from collections.abc import Sequence
from pathlib import Path
from typing import Any, NoReturn

import numpy as np

from compute import __version__
from compute.errors import SetupError
from compute.fileio import new_file_mode
from compute.snapshot import SnapshotError

__all__ = ["BadInput", "build_parser", "cuts_csv", "main"]

DEFAULT_PORT = 5006
EXIT_INVALID = 3  # --strict and a result whose validity report says invalid
CAUTION = (
    "A computed irradiance is no laser-safety assessment: follow the applicable "
    "laser-safety standard and your laser safety officer."
)


class BadInput(Exception):
    """Bad command-line input: ``(what, message)`` pairs, reported as ``error:`` lines."""

    def __init__(self, what: str, message: str):
        self.errors = [(what, message)]
        super().__init__(f"{what}: {message}")


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as ``error: ...`` lines with exit code 2."""

    def error(self, message: str) -> NoReturn:
        sys.stderr.write(f"error: {message}\n")
        sys.stderr.write(f"run '{self.prog} --help' for the usage\n")
        raise SystemExit(2)


# -- output helpers -------------------------------------------------------------


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist())
    if isinstance(value, np.generic):
        return _jsonable(value.item())
    if isinstance(value, float) and not np.isfinite(value):
        return None if np.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
    if hasattr(value, "to_dict"):
        return _jsonable(value.to_dict())
    return value


def _output_path(option: str, value: str, suffix: str) -> Path:
    path = Path(value)
    if path.suffix.lower() != suffix:
        raise BadInput(option, f"expected a file name ending in {suffix}, got {value!r}")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise BadInput(option, f"directory {str(parent)!r} does not exist")
    if path.is_dir():
        raise BadInput(option, f"{value!r} is a directory")
    return path


def _write_all(files: list[tuple[str, Path, bytes]]) -> None:
    """Write every file through a temporary neighbour, then move them all into place."""
    staged: list[tuple[str, Path, str]] = []
    mode = new_file_mode()
    try:
        for option, path, data in files:
            try:
                fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent or ".")
                with os.fdopen(fd, "wb") as fh:
                    os.fchmod(fd, mode)  # as open() would make it, not mkstemp's 0600
                    fh.write(data)
            except OSError as exc:
                raise BadInput(option, f"cannot write {str(path)!r} ({exc.strerror})") from None
            staged.append((option, path, tmp))
        for option, path, tmp in staged:
            try:
                os.replace(tmp, path)
            except OSError as exc:
                raise BadInput(option, f"cannot write {str(path)!r} ({exc.strerror})") from None
    finally:
        for _, _, tmp in staged:
            Path(tmp).unlink(missing_ok=True)


def _npz_bytes(result: Any, meta: dict[str, Any], with_field: bool) -> bytes:
    arrays = {
        "x": np.asarray(result.x, dtype=np.float64),
        "y": np.asarray(result.y, dtype=np.float64),
        "intensity": np.asarray(result.intensity, dtype=np.float64),
        "meta": np.array(json.dumps(meta, allow_nan=False)),
    }
    if with_field:
        arrays["field"] = np.asarray(result.field, dtype=np.complex128)
    # With a camera: the frame in digital numbers, its pixel centres and saturated pixels.
    extras = getattr(result, "extras", None) or {}
    for name in ("counts", "camera_x", "camera_y", "saturated"):
        if name in extras:
            arrays[name] = np.asarray(extras[name])
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getvalue()


def cuts_csv(x: np.ndarray, y: np.ndarray, intensity: np.ndarray, cx: float, cy: float) -> str:
    """Horizontal and vertical cuts through the pixel nearest to ``(cx, cy)`` as CSV.

    Columns: ``cut`` (horizontal or vertical), ``x_mm``, ``y_mm``, ``irradiance_W_per_m2``.
    """
    i = int(np.argmin(np.abs(x - cx)))
    j = int(np.argmin(np.abs(y - cy)))
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["cut", "x_mm", "y_mm", "irradiance_W_per_m2"])
    xs, ys = (x * 1e3).tolist(), (y * 1e3).tolist()  # Python floats: shortest exact repr
    row, col = intensity[j, :].tolist(), intensity[:, i].tolist()
    for k in range(x.size):
        writer.writerow(["horizontal", repr(xs[k]), repr(ys[j]), repr(row[k])])
    for k in range(y.size):
        writer.writerow(["vertical", repr(xs[i]), repr(ys[k]), repr(col[k])])
    return out.getvalue()


def _fmt(value: float | None, unit: str = "") -> str:
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return "none"
    text = f"{value:.4g}" if isinstance(value, (int, float)) else str(value)
    return f"{text} {unit}".rstrip() if unit else text


# -- commands -------------------------------------------------------------------


def _cmd_render(args: argparse.Namespace) -> int:
    from compute import engine, snapshot

    setup = snapshot.load(args.snapshot)
    targets = [("--out", _output_path("--out", args.out, ".npz"))]
    if args.png:
        targets.append(("--png", _output_path("--png", args.png, ".png")))
    if args.csv:
        targets.append(("--csv", _output_path("--csv", args.csv, ".csv")))
    seen: dict[Path, str] = {}
    for option, path in targets:
        key = path.resolve()
        if key in seen:
            raise BadInput(option, f"same file as {seen[key]}")
        seen[key] = option

    result = engine.compute(setup)
    if args.strict and result.plan.verdict == "invalid":
        _report_invalid(result.plan, "nothing written")
        return EXIT_INVALID
    meta = _jsonable(result.meta())
    meta.setdefault("snapshot_sha256", snapshot.physics_hash(setup))
    meta.setdefault("app_version", __version__)
    intensity = np.asarray(result.intensity, dtype=np.float64)
    x = np.asarray(result.x, dtype=np.float64)
    y = np.asarray(result.y, dtype=np.float64)

    files = [("--out", targets[0][1], _npz_bytes(result, meta, args.field))]
    for option, path in targets[1:]:
        if option == "--png":
            from server.pngmap import irradiance_png

            title = str(setup.meta.get("title") or "Irradiance on the screen")
            files.append((option, path, irradiance_png(x, y, intensity, title=title)))
        else:
            text = cuts_csv(x, y, intensity, setup.screen.x, setup.screen.y)
            files.append((option, path, text.encode("utf-8")))
    _write_all(files)

    ny, nx = intensity.shape
    print(
        f"wrote {args.out}: {nx} × {ny} pixels, method {meta.get('method')}, "
        f"peak {_fmt(float(intensity.max()), 'W/m²')}, "
        f"{_fmt(float(meta.get('elapsed_s', 0.0)), 's')}"
    )
    for option, path, _ in files[1:]:
        print(f"wrote {path} ({option[2:]})")
    if result.plan.verdict == "invalid":
        print(f"verdict invalid: {_invalid_items(result.plan)} (meta verdict 'invalid')")
    print(CAUTION)
    return 0


def _invalid_items(plan: Any) -> str:
    return "; ".join(v.label for v in plan.validity if v.verdict == "invalid")


def _report_invalid(plan: Any, consequence: str) -> None:
    """The ``--strict`` refusal: one ``error:`` line naming the invalid report items."""
    sys.stderr.write(
        f"error: verdict invalid ({_invalid_items(plan)}); no method is valid within the "
        f"budget for this setup; {consequence} (--strict)\n"
    )


def _plan_json(plan: Any, sha: str) -> dict[str, Any]:
    return _jsonable(
        {
            "snapshot_sha256": sha,
            "method": plan.method,
            "variant": plan.variant,
            "fresnel_number": plan.fresnel_number,
            "grid": [plan.ny, plan.nx],
            "pitch": [plan.dy, plan.dx],
            "padded": list(plan.padded),
            "memory_bytes": plan.memory_bytes,
            "verdict": plan.verdict,
            "reasons": list(plan.reasons),
            "validity": [item.to_dict() for item in plan.validity],
        }
    )


def _cmd_check(args: argparse.Namespace) -> int:
    from compute import engine, snapshot

    setup = snapshot.load(args.snapshot)
    plan = engine.check(setup)
    report = _plan_json(plan, snapshot.physics_hash(setup))
    code = EXIT_INVALID if args.strict and plan.verdict == "invalid" else 0
    if args.json:
        print(json.dumps(report, indent=2, ensure_ascii=False, allow_nan=False))
        if code:
            _report_invalid(plan, "refused")
        return code
    print(f"snapshot        {args.snapshot} (physics sha256 {report['snapshot_sha256'][:12]})")
    print(f"method          {plan.method} ({plan.variant})")
    for reason in plan.reasons:
        print(f"                {reason}")
    print(f"verdict         {plan.verdict}")
    print(f"Fresnel number  {_fmt(plan.fresnel_number)}")
    print(
        f"grid (x × y)    {plan.nx} × {plan.ny} samples at {_fmt(plan.dx * 1e6)} × "
        f"{_fmt(plan.dy * 1e6)} µm; transform {plan.padded[1]} × {plan.padded[0]}; "
        f"memory {plan.memory_bytes / 2**20:.1f} MiB"
    )
    print()
    width = max((len(item.label) for item in plan.validity), default=10)
    for item in plan.validity:
        value = _fmt(item.value, item.unit)
        limit = _fmt(item.limit, item.unit)
        limit = "no limit" if limit == "none" else f"limit {limit}"
        print(f"{item.verdict:<9} {item.label:<{width}}  {value}  ({limit})")
        print(f"{'':<9} {item.sentence}")
    print()
    if plan.verdict == "invalid":
        print(f"VERDICT INVALID: {_invalid_items(plan)}; do not rely on this result.")
        print()
    print(CAUTION)
    if code:
        _report_invalid(plan, "refused")
    return code


def _cmd_serve(args: argparse.Namespace) -> int:
    from server import serving

    options = {
        "port": args.port,
        "preset": args.preset,
        "open": args.open,
        "share": args.share,
        "password": args.password,
        "password_file": args.password_file,
        "address": args.address,
        "max_sessions": args.max_sessions,
        "max_work": args.max_work,
    }
    try:
        serving.serve(**options)
    except serving.ServeError as exc:  # a bad preset, port, address or sharing option
        raise BadInput("", str(exc)) from None
    return 0


def _cmd_bench(args: argparse.Namespace) -> int:
    from server import benchmark

    return benchmark.run_from_args(args)


# -- parser -----------------------------------------------------------------------


def _port(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a port number, got {text!r}") from None
    if not 0 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"expected a port number 0 to 65535, got {value}")
    return value


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not (value > 0 and value < float("inf")):
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return value


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected at least 1, got {value}")
    return value


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``fringebench`` and its commands."""
    fmt = argparse.RawDescriptionHelpFormatter
    parser = _Parser(
        prog="fringebench",
        description="Scalar diffraction on the optical bench: render or check a snapshot,\n"
        "or serve the dashboard.",
        epilog="exit codes: 0 done, 2 bad input, 3 invalid verdict refused by --strict, "
        f"1 internal failure\n\n{CAUTION}",
        formatter_class=fmt,
    )
    parser.add_argument("--version", action="version", version=f"fringebench {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    render = sub.add_parser(
        "render",
        help="compute a snapshot and write the result as NPZ (and PNG, CSV)",
        description="Compute the screen irradiance of a snapshot and write it as a NumPy .npz\n"
        "file: x, y (m), intensity (W/m², float64, shape (ny, nx)) and meta (JSON text).",
        epilog="example:\n  fringebench render presets/default.json --out result.npz "
        "--png map.png --csv cuts.csv\n\nNothing is written when the snapshot is invalid.",
        formatter_class=fmt,
    )
    render.add_argument("snapshot", metavar="SNAPSHOT", help="snapshot file (JSON)")
    render.add_argument("--out", required=True, metavar="RESULT.npz", help="result file")
    render.add_argument(
        "--field", action="store_true", help="also store the complex field, √(W/m²)"
    )
    render.add_argument(
        "--png", metavar="MAP.png", help="irradiance map with colour bar and scale bar"
    )
    render.add_argument(
        "--csv",
        metavar="CUTS.csv",
        help="horizontal and vertical cuts through the window centre (mm, W/m²)",
    )
    render.add_argument(
        "--strict",
        action="store_true",
        help="write nothing and exit with code 3 when the result's verdict is invalid",
    )
    render.set_defaults(func=_cmd_render)

    check = sub.add_parser(
        "check",
        help="print the plan and the validity report of a snapshot",
        description="Plan a snapshot without propagating: method, grid, Fresnel number and\n"
        "the validity report (value, limit, verdict and a sentence per item).",
        epilog="example:\n  fringebench check presets/default.json --json",
        formatter_class=fmt,
    )
    check.add_argument("snapshot", metavar="SNAPSHOT", help="snapshot file (JSON)")
    check.add_argument("--json", action="store_true", help="print the report as JSON")
    check.add_argument(
        "--strict",
        action="store_true",
        help="exit with code 3 when the verdict is invalid (the report is still printed)",
    )
    check.set_defaults(func=_cmd_check)

    serve = sub.add_parser(
        "serve",
        help="serve the dashboard (on 127.0.0.1 unless sharing)",
        description="Serve the dashboard. It listens on 127.0.0.1 unless --share opens it\n"
        "to the lab network behind a password.",
        epilog="example:\n  fringebench serve --port 5006 --preset default --open",
        formatter_class=fmt,
    )
    serve.add_argument("--port", type=_port, default=DEFAULT_PORT, help="port (default 5006)")
    serve.add_argument(
        "--preset",
        metavar="NAME|FILE",
        help="preset name from presets/ or a snapshot file to start on (default: default)",
    )
    serve.add_argument("--open", action="store_true", help="open a browser tab")
    serve.add_argument(
        "--share", action="store_true", help="listen on the lab network, behind a password"
    )
    secret = serve.add_mutually_exclusive_group()
    secret.add_argument("--password", help="password for a shared session")
    secret.add_argument("--password-file", metavar="FILE", help="read the password from FILE")
    serve.add_argument("--address", help="address to bind (default 127.0.0.1)")
    serve.add_argument(
        "--max-sessions",
        type=_positive_int,
        default=16,  # serving.DEFAULT_MAX_SESSIONS (serving is imported by serve alone)
        metavar="N",
        help="browser sessions served at once (default 16); a further one gets a notice",
    )
    serve.add_argument(
        "--max-work",
        type=_positive_float,
        default=None,
        metavar="GFLOP",
        help="largest computation the server starts, in billions of floating-point "
        "operations as estimated from the plan (default 200, a minute or two of one core); "
        "a larger one is refused with its estimate",
    )
    serve.set_defaults(func=_cmd_serve)

    bench = sub.add_parser(
        "bench",
        help="measure propagation speed against a bare FFT pair and plain numpy",
        description="Time each FFT-based propagation against a bare forward and inverse FFT "
        "of the same size and against the plain numpy recipe, in one run on this machine; "
        "then a cached repeat, the default preset, a camera window and the peak memory.",
        epilog="example:\n  fringebench bench --quick --json",
        formatter_class=fmt,
    )
    bench.add_argument("--json", action="store_true", help="print the rows as a JSON list")
    bench.add_argument(
        "--quick", action="store_true", help="N = 1024 and 2048 in single precision only"
    )
    bench.add_argument("--tiny", action="store_true", help=argparse.SUPPRESS)  # N = 256, tests
    bench.set_defaults(func=_cmd_bench)

    from server import sweepcli  # the sweep command lives in its own module

    sweep = sub.add_parser(
        "sweep",
        help=sweepcli.HELP,
        description=sweepcli.DESCRIPTION,
        epilog=sweepcli.EPILOG,
        formatter_class=fmt,
    )
    sweepcli.add_arguments(sweep)
    sweep.set_defaults(func=sweepcli.run)
    return parser


def _report_errors(errors: Sequence[tuple[str, str]]) -> None:
    for path, message in errors:
        text = f"{path}: {message}" if path else message
        for line in text.splitlines() or [""]:
            sys.stderr.write(f"error: {line}\n")


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``fringebench`` with ``argv`` (default: the process arguments); return the exit code."""
    for stream in (sys.stdout, sys.stderr):
        if hasattr(stream, "reconfigure"):  # never fail on a terminal without µ or ²
            stream.reconfigure(errors="backslashreplace")
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, usage errors
        return int(exc.code or 0)
    try:
        return args.func(args)
    except SnapshotError as exc:
        _report_errors(exc.errors)
    except SetupError as exc:
        _report_errors([(exc.path, exc.message)])
    except BadInput as exc:
        _report_errors(exc.errors)
    except KeyboardInterrupt:
        sys.stderr.write("error: interrupted\n")
        return 130
    except BrokenPipeError:  # stdout closed early (e.g. piped into head): stop quietly
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 1
    except Exception as exc:
        message = f"{type(exc).__name__}: {exc}".replace("\n", " ")
        sys.stderr.write(f"error: internal failure: {message}\n")
        if os.environ.get("FRINGEBENCH_DEBUG") == "1":
            traceback.print_exc()
        return 1
    return 2


if __name__ == "__main__":
    sys.exit(main())
