"""``fringebench sweep``: a snapshot computed over ranges of its settings, one CSV row a point.

The work is :mod:`compute.sweep`; this module reads the command line, reports
progress on stderr and writes the CSV. Bad input (a bad ``--vary``, snapshot,
output path or executor) exits 2 with ``error:`` lines that name it, before
anything is computed or written; the CSV is written only when every point is done.
"""

from __future__ import annotations

import argparse
import csv
import io
import os
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any, TextIO

from compute import snapshot, sweep
from compute.fileio import new_file_mode
from compute.snapshot import SnapshotError

__all__ = ["DESCRIPTION", "EPILOG", "HELP", "add_arguments", "csv_text", "run"]

HELP = "compute a snapshot over ranges of settings and write one CSV row per point"
DESCRIPTION = (
    "Vary one or more settings of a snapshot over linear or logarithmic ranges and "
    "write one CSV row per point: a column per varied PATH, then fresnel_number, "
    "method, variant, validity, peak_irradiance (W/m²), peak_x, peak_y (m), "
    "window_power (W), d4sigma_x, d4sigma_y, central_lobe_x, central_lobe_y, fwhm_x, "
    "fwhm_y (m), visibility and error. Every point is computed on its own, so the "
    "numbers are the same in series, on local workers or on a scheduler. Progress "
    "goes to stderr."
)
EPILOG = (
    "PATH is a snapshot path such as screen.distance, source.wavelength or "
    "aperture.elements[0].width; COUNT ≥ 2 values from START to STOP, both included, "
    "evenly spaced or, with ':log', geometrically. Several --vary make a grid, the "
    "first outermost.\n\n"
    "examples:\n"
    "  fringebench sweep presets/default.json --vary screen.distance=0.01:10:31:log "
    "--out distance.csv\n"
    "  fringebench sweep presets/default.json --vary 'aperture.elements[0].width=4e-5:1.2e-4:9' "
    "--vary source.wavelength=4.5e-7:6.5e-7:5 --out map.csv --workers 2\n"
    "  fringebench sweep presets/default.json --vary screen.distance=0.5:2:16 --out d.csv "
    "--scheduler tcp://127.0.0.1:8786\n\n"
    "Nothing is written when the input is bad or the sweep is interrupted."
)


def _workers(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected a number of workers from 1 to 256, got {text!r}"
        ) from None
    if not 1 <= value <= 256:
        raise argparse.ArgumentTypeError(f"expected a number of workers from 1 to 256, got {value}")
    return value


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The arguments of ``fringebench sweep``."""
    parser.add_argument("snapshot", metavar="SNAPSHOT", help="snapshot file (JSON)")
    parser.add_argument(
        "--vary",
        action="append",
        required=True,
        metavar="PATH=START:STOP:COUNT[:log]",
        help="a setting and its range; give --vary again for a grid",
    )
    parser.add_argument("--out", required=True, metavar="FILE.csv", help="the CSV to write")
    where = parser.add_mutually_exclusive_group()
    where.add_argument(
        "--workers",
        type=_workers,
        metavar="N",
        help="compute on a local Dask cluster of N processes on 127.0.0.1 (default: in "
        "series); starting it takes a few seconds, so it pays off for longer sweeps",
    )
    where.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="compute on the workers of an existing Dask scheduler, e.g. tcp://127.0.0.1:8786",
    )


class BadSweepInput(Exception):
    """Bad input for the sweep: ``(what, message)``, reported as one ``error:`` line."""

    def __init__(self, what: str, message: str):
        self.what, self.message = what, message
        super().__init__(f"{what}: {message}")


def _out_path(value: str) -> Path:
    path = Path(value)
    if path.suffix.lower() != ".csv":
        raise BadSweepInput("--out", f"expected a file name ending in .csv, got {value!r}")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise BadSweepInput("--out", f"directory {str(parent)!r} does not exist")
    if path.is_dir():
        raise BadSweepInput("--out", f"{value!r} is a directory")
    return path


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)  # the shortest text that reads back to the same number
    return str(value)


def csv_text(rows: Sequence[dict[str, Any]], columns: Sequence[str]) -> str:
    """The rows as CSV with a header; numbers in their shortest exact form, None empty."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow([_cell(row.get(c)) for c in columns])
    return out.getvalue()


def _write(path: Path, text: str) -> None:
    """Write through a temporary neighbour, then move it into place."""
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent or ".")
    except OSError as exc:
        raise BadSweepInput("--out", f"cannot write {str(path)!r} ({exc.strerror})") from None
    try:
        os.fchmod(fd, new_file_mode())  # as open() would make it, not mkstemp's 0600
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except OSError as exc:
        raise BadSweepInput("--out", f"cannot write {str(path)!r} ({exc.strerror})") from None
    finally:
        Path(tmp).unlink(missing_ok=True)


class _Progress:
    """Progress on stderr: one updated line on a terminal, else a line every tenth."""

    def __init__(self, total: int, stream: TextIO):
        self.total, self.stream = total, stream
        self.tty = bool(getattr(stream, "isatty", lambda: False)())
        self.t0 = time.monotonic()
        self.last_tenth = 0

    def __call__(self, p: sweep.SweepProgress) -> None:
        tenth = 10 * p.done // p.total
        if not self.tty and tenth == self.last_tenth and p.done != p.total:
            return
        self.last_tenth = tenth
        elapsed = time.monotonic() - self.t0
        left = elapsed / p.done * (p.total - p.done)
        text = (
            f"sweep: {p.done}/{p.total} points ({100 * p.done / p.total:.0f} %), "
            f"{elapsed:.1f} s" + (f", about {left:.0f} s left" if p.done < p.total else "")
        )
        if self.tty:
            self.stream.write("\r" + text.ljust(60) + ("\n" if p.done == p.total else ""))
        else:
            self.stream.write(text + "\n")
        self.stream.flush()


def _errors(what: str, message: str) -> None:
    label = {"scheduler": "--scheduler", "workers": "--workers", "vary": "--vary"}.get(
        what, f"--vary {what}"
    )
    sys.stderr.write(f"error: {label}: {message}\n")


def run(args: argparse.Namespace) -> int:
    """Run ``fringebench sweep`` with parsed ``args``; return the exit code (0 or 2).

    Internal failures are raised for the caller to report.
    """
    from server.cli import CAUTION

    try:
        out = _out_path(args.out)
        varies = [sweep.parse_vary(text) for text in args.vary]
        setup = snapshot.load(args.snapshot)
        plan = sweep.plan_sweep(setup, varies)
    except sweep.SweepError as exc:
        _errors(exc.what, exc.message)
        return 2
    except BadSweepInput as exc:
        sys.stderr.write(f"error: {exc.what}: {exc.message}\n")
        return 2
    except SnapshotError as exc:
        for path, message in exc.errors:
            sys.stderr.write(f"error: {path}: {message}\n" if path else f"error: {message}\n")
        return 2
    where = (
        f"on {args.workers} local worker{'s' if args.workers != 1 else ''}"
        if args.workers
        else f"on the scheduler at {args.scheduler}"
        if args.scheduler
        else "in series"
    )
    shape = " × ".join(f"{n} {p}" for (p, _), n in zip(plan.axes, plan.shape, strict=True))
    sys.stderr.write(f"sweep: {plan.total} points ({shape}) {where}\n")
    try:
        rows = sweep.run_plan(
            plan,
            workers=args.workers,
            scheduler=args.scheduler,
            progress=_Progress(plan.total, sys.stderr),
        )
        _write(out, csv_text(rows, plan.columns))
    except sweep.SweepError as exc:
        _errors(exc.what, exc.message)
        return 2
    except BadSweepInput as exc:
        sys.stderr.write(f"error: {exc.what}: {exc.message}\n")
        return 2
    failed = [r for r in rows if r["error"]]
    methods: dict[str, int] = {}
    for r in rows:
        if r["method"]:
            methods[r["method"]] = methods.get(r["method"], 0) + 1
    summary = ", ".join(f"{m} {n}" for m, n in methods.items()) or "none"
    print(f"wrote {args.out}: {len(rows)} rows; methods: {summary}")
    if failed:
        sys.stderr.write(
            f"warning: {len(failed)} of {len(rows)} points could not be computed; "
            f"their error column says why (first: {failed[0]['error']})\n"
        )
    print(CAUTION)
    return 0
