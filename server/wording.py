"""The dashboard's own words for settings, refused values and failures.

A snapshot path (``screen.samples``, ``aperture.elements[1].width``) is how the
code names a setting; a person sees its label ("Pixels across", "element 2
width"; :func:`server.controls.path_label`). Messages that reach the page go
through :func:`plain`, which puts the labels in place of the paths, and a
refused number is said with :func:`refusal` in the control's own unit
("Distance must be more than 0 m").
Numbers are written with :func:`number` (significant digits, no trailing zeros)
and lengths with :func:`length` (mm below 0.1 m, µm below 0.1 mm).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass

__all__ = [
    "PATH",
    "Fix",
    "fix_for",
    "length",
    "longest_exposure",
    "missing_readings",
    "number",
    "plain",
    "refusal",
]

#: A snapshot path in running text: its section, the rest, an element index and name.
PATH = re.compile(
    r"\b(source|screen|numerics|camera|aperture)\.(elements\[(\d+)\](?:\.(\w+))?|\w+)"
)


def plain(text: str, label_of: Callable[[str], str]) -> str:
    """``text`` with every snapshot path replaced by its label, in quotes.

    ``label_of(path)`` gives the label (the path itself when it has none):
    ``"screen.samples: too many; lower screen.samples"`` reads
    ``"“Pixels across”: too many; lower “Pixels across”"``.
    """

    def sub(m: re.Match) -> str:
        label = label_of(m.group(0))
        return m.group(0) if label == m.group(0) else f"“{label}”"

    return PATH.sub(sub, text)


def number(v: float, digits: int = 4) -> str:
    """``v`` with ``digits`` significant digits and no trailing zeros (``0.00617``, ``5``)."""
    if v is None or not math.isfinite(v):
        return "—"
    if v == 0:
        return "0"
    a = abs(v)
    if 1e-4 <= a < 1e7:
        decimals = max(0, digits - 1 - math.floor(math.log10(a)))
        text = f"{v:.{decimals}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
        return text
    return f"{v:.{digits}g}"


def length(v: float | None, digits: int = 4) -> str:
    """A length in metres as people write it: m from 0.1 m, mm from 0.1 mm, else µm."""
    if v is None or not math.isfinite(v):
        return "—"
    a = abs(v)
    if a >= 0.1:
        return f"{number(v, digits)} m"
    if a >= 1e-4 or a == 0:
        return f"{number(v * 1e3, digits)} mm"
    return f"{number(v * 1e6, digits)} µm"


def refusal(
    label: str,
    unit: str,
    value: float | None,
    lower: float | None,
    upper: float | None,
    *,
    lower_open: bool = False,
    upper_open: bool = False,
    current: float | None = None,
    integer: bool = False,
) -> str | None:
    """Why ``value`` (display units) is refused, in the control's words; None when it is fine.

    ``current`` is the value the setting keeps, said at the end when given. A
    length, wavelength or time whose model bound is a tiny positive number is said
    to need "more than 0" when a value of 0 or less is given.
    """
    u = f" {unit}" if unit else ""
    keeps = "" if current is None else f"; it stays at {number(current, 6)}{u}"
    if value is None or isinstance(value, bool) or not math.isfinite(value):
        return f"{label} needs a number{keeps}"
    if not integer and lower is not None and 0 < lower < 1 and value <= 0:
        # A length, a wavelength, a pitch: what matters is that it is positive.
        return f"{label} must be more than 0{u}{keeps}"
    if lower is not None and (value < lower or (lower_open and value <= lower)):
        word = "more than" if lower_open else "at least"
        return f"{label} must be {word} {number(lower, 6)}{u}{keeps}"
    if upper is not None and (value > upper or (upper_open and value >= upper)):
        word = "less than" if upper_open else "at most"
        return f"{label} must be {word} {number(upper, 6)}{u}{keeps}"
    return None


@dataclass(frozen=True)
class Fix:
    """A one-click remedy for a failure: a button label and the setting it changes."""

    label: str
    path: str
    value: object


def fix_for(path: str, text: str, grid: int) -> Fix | None:
    """The remedy for a failure of the core at ``path`` saying ``text``, if there is one.

    A fixed grid that is too large or too coarse goes back to automatic; the
    direct Rayleigh–Sommerfeld sum that is too large goes back to the automatic
    method.
    """
    if grid and (path == "numerics.grid" or "numerics.grid" in text):
        return Fix("Set grid to automatic", "numerics.grid", 0)
    if path == "numerics.method" and "Rayleigh" in text:
        return Fix("Set method to automatic", "numerics.method", "auto")
    return None


def missing_readings(numbers: dict) -> list[str]:
    """Which readings the window cannot give, in plain words (empty when all are there).

    ``numbers`` is :func:`server.views.read_numbers`: the first minima either side
    of the peak along x, the central lobe along x and y are None when the window
    ends before the first dark fringe.
    """
    if numbers.get("peak") in (None, 0) or numbers.get("peak_x") is None:
        return []
    out = []
    if numbers.get("first_min_left") is None or numbers.get("first_min_right") is None:
        out.append("the first minima along x fall outside the window")
    lobe = [a for a in ("x", "y") if numbers.get(f"central_lobe_{a}") is None]
    if lobe:
        out.append(f"the central lobe along {' and '.join(lobe)} is wider than the window")
    return out


def longest_exposure(exposure: float, peak_electrons: float, full_well: float) -> float | None:
    """The longest exposure (s) at which the brightest pixel stays below the full well.

    The mean photoelectrons grow in proportion to the exposure (the linear camera
    model, EMVA 1288 release 4.0), so the brightest pixel reaches the full well at
    ``exposure × full_well / peak_electrons``. With shot noise a pixel can still
    fill on a bright draw near that time. None when no light arrives.
    """
    if not (peak_electrons > 0 and exposure > 0 and full_well > 0):
        return None
    return exposure * full_well / peak_electrons
