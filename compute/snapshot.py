"""Snapshots: a whole setup as versioned JSON, read with strict validation.

A snapshot (format ``fringebench-snapshot``, version 1) holds the source, the
aperture, the screen and the numerics of one bench, plus free ``meta`` and
``view`` sections. The reader checks every key against the model in
:mod:`compute.model` (types, bounds, allowed choices, the cross-parameter
rules of :meth:`compute.model.Setup.check`) and reports *all* problems of a
document at once, each with its path (``aperture.elements[1].width``), the
value found and what was expected.

The canonical form of a snapshot keeps the physics sections only, with sorted
keys and normalised numbers; its SHA-256 identifies the physics of a setup, so
that display settings and notes never change it.

Keys that later releases of version 1 added (the spectrum and the size of the
source, the ``camera`` section) are optional: a document without them reads as
before, and they are written, and enter the canonical form, only when they
differ from their defaults, so that older snapshots keep their bytes and hash.
"""

from __future__ import annotations

import copy
import datetime
import hashlib
import json
import math
import os
import stat
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import param

from compute import model
from compute.fileio import new_file_mode
from compute.model import (
    ELEMENT_TYPES,
    Aperture,
    Camera,
    Element,
    Numerics,
    Screen,
    Setup,
    Source,
)
from compute.pngdata import PngDataError, decode_png_data_url

__all__ = [
    "FORMAT",
    "MAX_SNAPSHOT_BYTES",
    "PHYSICS_SECTIONS",
    "VERSION",
    "SnapshotError",
    "canonical_json",
    "dumps",
    "from_dict",
    "load",
    "loads",
    "migrate",
    "physics_hash",
    "save",
    "to_dict",
]

FORMAT = "fringebench-snapshot"
VERSION = 1
MAX_SNAPSHOT_BYTES = 5 * 1024 * 1024
PHYSICS_SECTIONS = ("source", "aperture", "screen", "numerics")

_TOP_KEYS = (
    "format",
    "version",
    "meta",
    "source",
    "aperture",
    "screen",
    "numerics",
    "camera",
    "view",
)
_REQUIRED_TOP = ("format", "version", "source", "aperture", "screen", "numerics")
_META_KEYS = ("title", "note", "created", "app_version")

# Keys that a section must spell out. Every other key falls back to the model
# default, which is the neutral choice (no tilt, no offset, no lens, automatic).
_SOURCE_REQUIRED = {
    "plane": ("kind", "wavelength", "irradiance"),
    "gaussian": ("kind", "wavelength", "power", "waist"),
    "point": ("kind", "wavelength", "power", "distance"),
}
_SCREEN_REQUIRED = ("distance", "width", "height", "samples")
_NUMERICS_REQUIRED: tuple[str, ...] = ()
# A camera section, when present, must say what the sensor is; the rest has defaults.
_CAMERA_REQUIRED = ("pixel_pitch", "pixels_x", "pixels_y")
# Source keys added after the first release: left out when at their defaults, so that
# a snapshot without them keeps its bytes and its physics hash.
_SOURCE_OPTIONAL = ("spectrum", "bandwidth", "spectral_samples", "source_diameter")
_APERTURE_REQUIRED = ("background", "elements")
_ELEMENT_REQUIRED = ("shape", "x", "y")
_ELEMENT_COMMON = ("x", "y", "angle", "transmission", "phase")

_MAX_VIEW_DEPTH = 64

# Migrations from version n to n + 1, each a pure function of the document.
# A future version 2 reader adds ``_MIGRATIONS[1] = _from_v1`` here.
_MIGRATIONS: dict[int, Callable[[dict[str, Any]], dict[str, Any]]] = {}


class SnapshotError(ValueError):
    """A snapshot that cannot be read; ``errors`` lists every problem found.

    Parameters
    ----------
    errors
        ``[(path, message), ...]``; ``path`` names the key (``screen.distance``)
        or, for problems with the document as a whole, the file or ``snapshot``.
    """

    def __init__(self, errors: list[tuple[str, str]]):
        self.errors: list[tuple[str, str]] = list(errors)
        super().__init__("\n".join(f"{p}: {m}" if p else m for p, m in self.errors))


class _NonFinite:
    """Stands in for a ``NaN``/``Infinity`` token so that the reader can name its path."""

    __slots__ = ("token",)

    def __init__(self, token: str):
        self.token = token

    def __repr__(self) -> str:
        return self.token


class _JsonObject(dict):
    """A parsed JSON object that remembers keys which appeared more than once."""

    duplicates: tuple[str, ...] = ()


def _object_pairs(pairs: list[tuple[str, Any]]) -> _JsonObject:
    obj = _JsonObject()
    dups = []
    for key, value in pairs:
        if key in obj:
            dups.append(key)
        obj[key] = value
    if dups:
        obj.duplicates = tuple(dups)
    return obj


def _show(value: Any, limit: int = 60) -> str:
    """A short JSON rendering of a value for an error message."""
    if isinstance(value, _NonFinite):
        return value.token
    if isinstance(value, float) and not math.isfinite(value):
        return "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) > 10**30:
        return f"{'-' if value < 0 else ''}an integer of {len(str(abs(value)))} digits"
    try:
        text = json.dumps(value, ensure_ascii=False, default=repr)
    except (TypeError, ValueError, RecursionError):
        text = repr(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _kind(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, (int, float, _NonFinite)):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "an object"
    return type(value).__name__


def _fmt(x: float) -> str:
    """A bound as docs/snapshot.md writes it: whole numbers in full (4294967295), round
    powers of ten and small fractions in the shortest form with a plain exponent
    (1e4, 1e-10), everything else as ``%g`` (0.001, 6.28319)."""
    x = float(x)
    if x.is_integer() and abs(x) < 2**53:
        whole = str(int(x))
        if abs(x) < 1e4 or not whole.endswith("0000"):
            return whole
        mantissa, exponent = f"{x:e}".split("e")
        return f"{mantissa.rstrip('0').rstrip('.')}e{int(exponent)}"
    mantissa, _, exponent = f"{x:g}".partition("e")
    return f"{mantissa}e{int(exponent)}" if exponent else mantissa


def _range_text(p: param.Number, unit: str) -> str:
    lo, hi = p.bounds if p.bounds is not None else (None, None)
    inc_lo, inc_hi = p.inclusive_bounds
    suffix = f" {unit}" if unit else ""
    if lo is not None and hi is not None:
        return f"in {'[' if inc_lo else '('}{_fmt(lo)}, {_fmt(hi)}{']' if inc_hi else ')'}{suffix}"
    if lo is not None:
        return f"{'≥' if inc_lo else '>'} {_fmt(lo)}{suffix}"
    if hi is not None:
        return f"{'≤' if inc_hi else '<'} {_fmt(hi)}{suffix}"
    return f"(any finite value){suffix}"


def _in_bounds(value: float, p: param.Number) -> bool:
    if p.bounds is None:
        return True
    lo, hi = p.bounds
    inc_lo, inc_hi = p.inclusive_bounds
    if lo is not None and (value < lo or (value == lo and not inc_lo)):
        return False
    return not (hi is not None and (value > hi or (value == hi and not inc_hi)))


def _param_names(cls: type[param.Parameterized]) -> list[str]:
    return [n for n in cls.param if n != "name"]


def _element_keys(cls: type[Element]) -> list[str]:
    common = set(_param_names(Element))
    own = [n for n in _param_names(cls) if n not in common]
    return ["x", "y", *own, "angle", "transmission", "phase"]


class _Reader:
    """Walks a snapshot document, collecting ``(path, message)`` for every problem."""

    def __init__(self) -> None:
        self.errors: list[tuple[str, str]] = []

    def error(self, path: str, message: str) -> None:
        self.errors.append((path, message))

    # -- containers -------------------------------------------------------

    def object(self, value: Any, path: str) -> dict[str, Any] | None:
        if not isinstance(value, dict):
            self.error(path, f"expected an object, got {_show(value)} ({_kind(value)})")
            return None
        for key in getattr(value, "duplicates", ()):
            self.error(f"{path}.{key}", "duplicate key; each key may appear once")
        return value

    def keys(
        self, obj: dict[str, Any], path: str, allowed: list[str], required: tuple[str, ...]
    ) -> None:
        for key in obj:
            if key not in allowed:
                self.error(
                    f"{path}.{key}",
                    f"unknown key {_show(key)}; expected one of {', '.join(allowed)}",
                )
        for key in required:
            if key not in obj:
                self.error(f"{path}.{key}", "missing required key")

    # -- scalars ----------------------------------------------------------

    def value(self, value: Any, path: str, p: param.Parameter, unit: str) -> tuple[bool, Any]:
        """Check one value against its parameter; return ``(ok, cleaned value)``."""
        if isinstance(p, param.Selector):
            return self.choice(value, path, list(p.objects))
        if isinstance(p, param.Boolean):
            if isinstance(value, bool):
                return True, value
            self.error(path, f"expected true or false, got {_show(value)} ({_kind(value)})")
            return False, None
        if isinstance(p, param.Number):
            if value is None and p.allow_None:
                return True, None
            return self.number(value, path, p, unit)
        # The model's only list and string parameters: polygon vertices, image data.
        if isinstance(p, param.List):
            out = self.vertices(value, path)
            return out is not None, out
        if isinstance(p, param.String):
            out = self.png_data(value, path)
            return out is not None, out
        raise TypeError(f"no snapshot reader for parameter {p.name!r}")  # a model change

    def choice(self, value: Any, path: str, choices: list[str]) -> tuple[bool, Any]:
        if isinstance(value, str) and value in choices:
            return True, value
        self.error(
            path,
            f"expected one of {', '.join(_show(c) for c in choices)}, got {_show(value)}",
        )
        return False, None

    def number(self, value: Any, path: str, p: param.Number, unit: str) -> tuple[bool, Any]:
        integer = isinstance(p, param.Integer)
        what = "an integer" if integer else "a number"
        rng = _range_text(p, unit)
        nullable = " or null" if p.allow_None else ""
        if isinstance(value, _NonFinite) or (isinstance(value, float) and not math.isfinite(value)):
            self.error(path, f"expected a finite number {rng}{nullable}, got {_show(value)}")
            return False, None
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            got = f"{_show(value)} ({_kind(value)})"
            self.error(path, f"expected {what} {rng}{nullable}, got {got}")
            return False, None
        if integer and not isinstance(value, int):
            self.error(path, f"expected an integer {rng}, got {_show(value)}")
            return False, None
        if not _in_bounds(value, p):
            self.error(path, f"expected {what} {rng}, got {_show(value)}")
            return False, None
        return True, (int(value) if integer else float(value))

    # -- sections ---------------------------------------------------------

    def params(
        self,
        obj: dict[str, Any],
        path: str,
        cls: type[param.Parameterized],
        names: list[str],
    ) -> tuple[bool, dict[str, Any]]:
        """Read the keys ``names`` of ``obj`` (those present) as parameters of ``cls``."""
        ok, out = True, {}
        for name in names:
            if name not in obj:
                continue
            p = cls.param[name]
            unit = (p.metadata or {}).get("unit", "")
            good, val = self.value(obj[name], f"{path}.{name}", p, unit)
            ok &= good
            if good:
                out[name] = val
        return ok, out

    def source(self, value: Any) -> Source | None:
        obj = self.object(value, "source")
        if obj is None:
            return None
        n_before = len(self.errors)
        names = _param_names(Source)
        good, kind = False, None
        if "kind" in obj:
            good, kind = self.choice(obj["kind"], "source.kind", list(Source.param.kind.objects))
        # Keys that the kind does not use are allowed and kept.
        required = _SOURCE_REQUIRED.get(kind, ("kind", "wavelength")) if good else None
        self.keys(obj, "source", names, required or ("kind", "wavelength"))
        _, values = self.params(obj, "source", Source, [n for n in names if n != "kind"])
        if len(self.errors) > n_before:
            return None
        return Source(kind=kind, **values)

    def element(self, value: Any, path: str) -> Element | None:
        obj = self.object(value, path)
        if obj is None:
            return None
        if "shape" not in obj:
            self.error(
                f"{path}.shape", f"missing required key; expected one of {', '.join(ELEMENT_TYPES)}"
            )
            return None
        good, shape = self.choice(obj["shape"], f"{path}.shape", list(ELEMENT_TYPES))
        if not good:
            return None
        cls = ELEMENT_TYPES[shape]
        n_before = len(self.errors)
        keys = _element_keys(cls)
        own = [k for k in keys if k not in _ELEMENT_COMMON]
        self.keys(obj, path, ["shape", *keys], (*_ELEMENT_REQUIRED, *own))
        _, values = self.params(obj, path, cls, keys)
        if len(self.errors) > n_before:
            return None
        return cls(**values)

    def vertices(self, value: Any, path: str) -> list[list[float]] | None:
        if not isinstance(value, list):
            self.error(path, f"expected a list of [x, y] pairs in metres, got {_show(value)}")
            return None
        n = len(value)
        if not 3 <= n <= model.MAX_POLYGON_VERTICES:
            self.error(path, f"expected 3 to {model.MAX_POLYGON_VERTICES} vertices, got {n}")
            return None
        bound = param.Number(0.0, bounds=(-model.MAX_LENGTH, model.MAX_LENGTH))
        out: list[list[float]] = []
        for i, pair in enumerate(value):
            if not isinstance(pair, list) or len(pair) != 2:
                self.error(f"{path}[{i}]", f"expected [x, y] in metres, got {_show(pair)}")
                continue
            xy = []
            for j, c in enumerate(pair):
                good, val = self.number(c, f"{path}[{i}][{j}]", bound, "m")
                if good:
                    xy.append(val)
            out.append(xy)
        return out

    def png_data(self, value: Any, path: str) -> str | None:
        if not isinstance(value, str):
            self.error(path, f"expected a PNG data URL string, got {_show(value)} ({_kind(value)})")
            return None
        try:
            decode_png_data_url(value)
        except PngDataError as exc:
            self.error(path, str(exc))
            return None
        return value

    def aperture(self, value: Any) -> tuple[Aperture | None, set[int]]:
        """Return the aperture and the indices of broken elements.

        The aperture is ``None`` only when the section is not an object; broken
        elements are replaced by stand-ins so that the others keep their index.
        """
        obj = self.object(value, "aperture")
        if obj is None:
            return None, set()
        self.keys(obj, "aperture", ["background", "elements"], _APERTURE_REQUIRED)
        good, background = True, "opaque"
        if "background" in obj:
            good, background = self.choice(
                obj["background"], "aperture.background", list(Aperture.param.background.objects)
            )
        raw = obj.get("elements", [])
        if not isinstance(raw, list):
            self.error("aperture.elements", f"expected a list of elements, got {_show(raw)}")
            raw = []
        elements: list[Element] = []
        broken: set[int] = set()
        for i, item in enumerate(raw):
            el = self.element(item, f"aperture.elements[{i}]")
            if el is None:
                broken.add(i)
                el = model.Rect()
            elements.append(el)
        aperture = Aperture(background=background if good else "opaque", elements=elements)
        return aperture, broken

    def section(
        self,
        value: Any,
        path: str,
        cls: type[param.Parameterized],
        required: tuple[str, ...],
    ) -> param.Parameterized | None:
        obj = self.object(value, path)
        if obj is None:
            return None
        names = _param_names(cls)
        n_before = len(self.errors)
        self.keys(obj, path, names, required)
        _, values = self.params(obj, path, cls, names)
        if len(self.errors) > n_before:
            return None
        return cls(**values)

    def meta(self, value: Any) -> dict[str, Any]:
        obj = self.object(value, "meta")
        if obj is None:
            return {}
        self.keys(obj, "meta", list(_META_KEYS), ())
        out: dict[str, Any] = {}
        for key in _META_KEYS:
            if key not in obj:
                continue
            v = obj[key]
            if not isinstance(v, str):
                self.error(f"meta.{key}", f"expected a string, got {_show(v)} ({_kind(v)})")
                continue
            if key == "created" and not _is_iso_datetime(v):
                self.error(
                    "meta.created",
                    f"expected an ISO-8601 date and time such as "
                    f'"2026-12-01T09:30:00Z", got {_show(v)}',
                )
                continue
            out[key] = v
        return out

    def view(self, value: Any) -> dict[str, Any]:
        obj = self.object(value, "view")
        if obj is None:
            return {}
        return self.json_value(obj, "view", 0)

    def json_value(self, value: Any, path: str, depth: int) -> Any:
        """A plain copy of a JSON value; non-JSON values are reported."""
        if depth > _MAX_VIEW_DEPTH:
            self.error(path, f"nested deeper than {_MAX_VIEW_DEPTH} levels")
            return None
        if isinstance(value, dict):
            for key in getattr(value, "duplicates", ()):
                self.error(f"{path}.{key}", "duplicate key; each key may appear once")
            out = {}
            for k, v in value.items():
                if not isinstance(k, str):
                    self.error(path, f"object keys must be strings, got {_show(k)}")
                    continue
                out[k] = self.json_value(v, f"{path}.{k}", depth + 1)
            return out
        if isinstance(value, list):
            return [self.json_value(v, f"{path}[{i}]", depth + 1) for i, v in enumerate(value)]
        if isinstance(value, _NonFinite) or (isinstance(value, float) and not math.isfinite(value)):
            self.error(path, f"expected a JSON value, got {_show(value)} (not a finite number)")
            return None
        if value is None or isinstance(value, (str, bool, int, float)):
            return value
        self.error(path, f"expected a JSON value, got {type(value).__name__}")
        return None


def _is_iso_datetime(text: str) -> bool:
    # Python 3.10's fromisoformat does not read a trailing "Z".
    candidate = text[:-1] + "+00:00" if text.endswith(("Z", "z")) else text
    try:
        datetime.datetime.fromisoformat(candidate)
    except ValueError:
        return False
    return True


def _check_version(data: dict[str, Any], reader: _Reader) -> int | None:
    if "version" not in data:
        reader.error("version", f"missing required key; this reader knows version {VERSION}")
        return None
    v = data["version"]
    if isinstance(v, bool) or not isinstance(v, int):
        reader.error("version", f"expected an integer version number, got {_show(v)}")
        return None
    if v > VERSION:
        reader.error(
            "version",
            f"version {v} is newer than this fringebench reads (versions up to {VERSION}); "
            "update fringebench to open this snapshot",
        )
        return None
    if v < 1:
        reader.error("version", f"{v} is not a fringebench snapshot version (versions start at 1)")
        return None
    return v


def migrate(data: dict[str, Any]) -> dict[str, Any]:
    """Bring a snapshot document of an older version up to :data:`VERSION`.

    The input is not changed; a current document comes back as a copy.

    Raises
    ------
    SnapshotError
        When the version is missing, not an integer, below 1 or newer than this reader.
    """
    reader = _Reader()
    version = _check_version(data, reader)
    if version is None:
        raise SnapshotError(reader.errors)
    doc = copy.deepcopy(data)
    while version < VERSION:
        doc = _MIGRATIONS[version](doc)
        version = doc["version"]
    return doc


def _from_document(data: Any, where: str) -> Setup:
    if not isinstance(data, dict):
        raise SnapshotError(
            [(where, f"expected a JSON object at the top level, got {_kind(data)}")]
        )
    reader = _Reader()
    for key in getattr(data, "duplicates", ()):
        reader.error(key, "duplicate key; each key may appear once")
    if "format" not in data:
        reader.error("format", f"missing required key; expected {_show(FORMAT)}")
    elif data["format"] != FORMAT:
        reader.error("format", f"expected {_show(FORMAT)}, got {_show(data['format'])}")
    if _check_version(data, reader) is None:
        # Nothing else can be read reliably without a known version.
        raise SnapshotError(reader.errors)
    data = migrate(data)

    for key in data:
        if key not in _TOP_KEYS:
            reader.error(
                str(key), f"unknown key {_show(key)}; expected one of {', '.join(_TOP_KEYS)}"
            )
    for key in _REQUIRED_TOP[2:]:
        if key not in data:
            reader.error(key, "missing required section")

    meta = reader.meta(data["meta"]) if "meta" in data else {}
    source = reader.source(data["source"]) if "source" in data else None
    aperture, broken = reader.aperture(data["aperture"]) if "aperture" in data else (None, set())
    screen = (
        reader.section(data["screen"], "screen", Screen, _SCREEN_REQUIRED)
        if "screen" in data
        else None
    )
    numerics = (
        reader.section(data["numerics"], "numerics", Numerics, _NUMERICS_REQUIRED)
        if "numerics" in data
        else None
    )
    camera = None
    camera_broken = False
    if data.get("camera") is not None:
        camera = reader.section(data["camera"], "camera", Camera, _CAMERA_REQUIRED)
        camera_broken = camera is None
    view = reader.view(data["view"]) if "view" in data else {}

    # Cross-parameter rules of the model, on the sections that read cleanly;
    # broken parts are replaced by defaults and their findings dropped.
    skip = [
        name
        for name, part in (
            ("source", source),
            ("aperture", aperture),
            ("screen", screen),
            ("numerics", numerics),
        )
        if part is None
    ]
    skip += [f"aperture.elements[{i}]" for i in broken]
    if camera_broken:
        skip.append("camera")
    probe = Setup(
        source=source or Source(),
        aperture=aperture or Aperture(),
        screen=screen or Screen(),
        numerics=numerics or Numerics(),
        camera=camera,
    )
    for path, message in _cross_rules(probe):
        if not any(path == s or path.startswith((s + ".", s + "[")) for s in skip):
            reader.error(path, message)

    if reader.errors:
        raise SnapshotError(reader.errors)
    return Setup(
        source=source,
        aperture=aperture,
        screen=screen,
        numerics=numerics,
        camera=camera,
        meta=meta,
        view=view,
    )


def _cross_rules(probe: Setup) -> list[tuple[str, str]]:
    """``probe.check()``; when a rule overflows on extreme values, check part by part."""
    try:
        return probe.check()
    except ArithmeticError:
        pass
    parts: list[tuple[str, param.Parameterized]] = [
        ("source", probe.source),
        ("screen", probe.screen),
        ("numerics", probe.numerics),
    ]
    parts += [(f"aperture.elements[{i}]", el) for i, el in enumerate(probe.aperture.elements)]
    problems = []
    for prefix, part in parts:
        try:
            problems += [(f"{prefix}.{k}", m) for k, m in part.check()]
        except ArithmeticError:
            problems.append(
                (prefix, "these values are too extreme to compute with; use realistic sizes")
            )
    return problems


def from_dict(data: Any) -> Setup:
    """Build a :class:`~compute.model.Setup` from a parsed snapshot document.

    Every key is checked; all problems are collected before raising.

    Raises
    ------
    SnapshotError
        With every ``(path, message)`` found.
    """
    return _from_document(data, "snapshot")


def _clean_float(v: float) -> float:
    f = float(v)
    return 0.0 if f == 0.0 else f  # -0.0 -> 0.0


def _param_json(obj: param.Parameterized, name: str) -> Any:
    p = type(obj).param[name]  # the class parameter: no per-instance copy is made
    v = getattr(obj, name)
    if v is None:
        return None
    if isinstance(p, param.Integer):
        return int(v)
    if isinstance(p, param.Number):
        return _clean_float(v)
    if isinstance(p, param.List):
        return [[_clean_float(c) for c in pair] for pair in v]
    return v


def _section_json(obj: param.Parameterized, optional: tuple[str, ...] = ()) -> dict[str, Any]:
    """Every key of a section; those in ``optional`` only when they differ from the default."""
    out = {}
    for n in _param_names(type(obj)):
        if n in optional and getattr(obj, n) == type(obj).param[n].default:
            continue
        out[n] = _param_json(obj, n)
    return out


def to_dict(setup: Setup) -> dict[str, Any]:
    """The complete snapshot document of ``setup``: every key written, SI floats.

    The source keys added after the first release (spectrum, bandwidth, spectral
    samples, source diameter) are written only when they differ from their defaults,
    and the ``camera`` section only when a camera is set (then with every key).
    """
    elements = []
    for el in setup.aperture.elements:
        doc: dict[str, Any] = {"shape": el.shape}
        doc.update({k: _param_json(el, k) for k in _element_keys(type(el))})
        elements.append(doc)
    out = {
        "format": FORMAT,
        "version": VERSION,
        "meta": copy.deepcopy(dict(setup.meta)),
        "source": _section_json(setup.source, _SOURCE_OPTIONAL),
        "aperture": {"background": setup.aperture.background, "elements": elements},
        "screen": _section_json(setup.screen),
        "numerics": _section_json(setup.numerics),
    }
    if setup.camera is not None:
        out["camera"] = _section_json(setup.camera)
    out["view"] = copy.deepcopy(dict(setup.view))
    return out


def _parse(text: str | bytes, where: str) -> Any:
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise SnapshotError([(where, f"not UTF-8 text (byte {exc.start})")]) from None
    try:
        return json.loads(text, parse_constant=_NonFinite, object_pairs_hook=_object_pairs)
    except json.JSONDecodeError as exc:
        raise SnapshotError(
            [(where, f"malformed JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}")]
        ) from None
    except RecursionError:
        raise SnapshotError([(where, "malformed JSON: nested too deeply")]) from None


def loads(text: str | bytes, *, source: str = "snapshot") -> Setup:
    """Read a snapshot from JSON text; ``source`` names the document in messages."""
    return _from_document(_parse(text, source), source)


def dumps(setup: Setup) -> str:
    """The snapshot of ``setup`` as JSON text, indented by 2."""
    return json.dumps(to_dict(setup), indent=2, ensure_ascii=False, allow_nan=False)


def load(path: str | os.PathLike[str]) -> Setup:
    """Read a snapshot file (JSON only, at most :data:`MAX_SNAPSHOT_BYTES`).

    Raises
    ------
    SnapshotError
        For a missing, unreadable, oversized or invalid file; the first error
        names the file for problems with the file itself.
    """
    where = os.fspath(path)
    p = Path(where)
    limit_text = f"a snapshot is at most {MAX_SNAPSHOT_BYTES // 2**20} MB"
    try:
        if p.is_dir():
            raise SnapshotError([(where, "is a directory, not a snapshot file")])
        # Opened without blocking, then checked on the open file itself: a FIFO, a
        # device or a socket would otherwise wait for a writer (or read) forever.
        fd = os.open(p, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with open(fd, "rb") as fh:
            info = os.fstat(fd)
            if not stat.S_ISREG(info.st_mode):
                raise SnapshotError([(where, "is not a regular file (a pipe, device or socket)")])
            os.set_blocking(fd, True)
            size = info.st_size
            if size > MAX_SNAPSHOT_BYTES:
                raise SnapshotError([(where, f"file is {size / 2**20:.1f} MB; {limit_text}")])
            raw = fh.read(MAX_SNAPSHOT_BYTES + 1)
    except FileNotFoundError:
        raise SnapshotError([(where, "no such file")]) from None
    except OSError as exc:
        raise SnapshotError([(where, f"cannot read the file ({exc.strerror or exc})")]) from None
    if len(raw) > MAX_SNAPSHOT_BYTES:
        raise SnapshotError([(where, f"file is over 5 MB; {limit_text}")])
    return loads(raw, source=where)


def save(setup: Setup, path: str | os.PathLike[str]) -> None:
    """Write the snapshot of ``setup`` to ``path`` (replaced atomically)."""
    text = dumps(setup) + "\n"
    target = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=".snapshot-", suffix=".tmp", dir=target.parent or ".")
    try:
        os.fchmod(fd, new_file_mode())  # as open() would make it, not mkstemp's 0600
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _normalise(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _normalise(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_normalise(v) for v in value]
    if isinstance(value, float):
        return _clean_float(value)
    return value


def canonical_json(setup: Setup) -> str:
    """The physics of ``setup`` as compact JSON with sorted keys and normalised numbers.

    Only ``source``, ``aperture``, ``screen``, ``numerics`` and, when a camera is
    set, ``camera`` enter; ``meta`` and ``view`` never do. Float parameters are
    written as the shortest repr that reads back exactly, integer parameters as
    integers, ``-0.0`` as ``0.0``. Source keys at their defaults that the first
    release did not have are left out, so that the hash of an older snapshot stays.
    """
    doc = to_dict(setup)
    physics = {k: _normalise(doc[k]) for k in (*PHYSICS_SECTIONS, "camera") if k in doc}
    return json.dumps(
        physics, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False
    )


def physics_hash(setup: Setup) -> str:
    """SHA-256 (hex) of :func:`canonical_json`: identifies the physics of a setup."""
    return hashlib.sha256(canonical_json(setup).encode("ascii")).hexdigest()
