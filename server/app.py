"""The fringebench dashboard as a Panel app.

``panel serve server/app.py`` serves it (one dashboard per session, started on
the default preset, or on the setup carried by the link's ``?s=``);
``fringebench serve`` does the same through :mod:`server.serving`. In a
Jupyter notebook, ``create_app()`` displays inline.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

_ROOT = Path(__file__).resolve().parent.parent
if str(_ROOT) not in sys.path:  # `panel serve server/app.py` from a source checkout
    sys.path.insert(0, str(_ROOT))

import panel as pn  # noqa: E402

from compute import snapshot  # noqa: E402
from compute.model import Rect, Setup  # noqa: E402
from server import urlstate  # noqa: E402
from server.dashboard import Dashboard  # noqa: E402

__all__ = ["PRESETS_DIR", "PresetError", "create_app", "list_presets", "load_preset"]

PRESETS_DIR = _ROOT / "presets"
DEFAULT_PRESET = "default"

pn.extension("tabulator", notifications=True, theme="dark", sizing_mode="stretch_width")


class PresetError(LookupError):
    """A preset name or file that cannot be loaded; the message says why."""


def list_presets(directory: Path = PRESETS_DIR) -> dict[str, Path]:
    """``{title: path}`` of the presets, the default first, then by title.

    The title is the snapshot's ``meta.title``, or the file name without it.
    """
    found: list[tuple[str, Path]] = []
    for path in sorted(directory.glob("*.json")):
        try:
            with open(path, "rb") as fh:
                doc = json.loads(fh.read(snapshot.MAX_SNAPSHOT_BYTES))
            title = str((doc.get("meta") or {}).get("title") or path.stem)
        except (OSError, ValueError, AttributeError):
            continue
        found.append((title, path))
    found.sort(key=lambda tp: (tp[1].stem != DEFAULT_PRESET, tp[0].lower()))
    out: dict[str, Path] = {}
    for title, path in found:
        out[title if title not in out else f"{title} ({path.stem})"] = path
    return out


def fallback_setup() -> Setup:
    """The model defaults with one slit, for a checkout without presets (demo values)."""
    setup = Setup()
    setup.aperture.elements = [Rect()]
    return setup


def load_preset(name_or_file: str | Path | None = None) -> Setup:
    """The setup of a preset given by name (``presets/NAME.json``) or by file path.

    Raises
    ------
    PresetError
        When there is no such preset or file, or the snapshot inside is invalid.
    """
    if name_or_file is None:
        path = PRESETS_DIR / f"{DEFAULT_PRESET}.json"
        if not path.exists():
            return fallback_setup()
    else:
        given = Path(name_or_file)
        by_name = PRESETS_DIR / f"{name_or_file}.json"
        if given.suffix == ".json" or given.exists():
            path = given
        elif by_name.exists():
            path = by_name
        else:
            names = ", ".join(sorted(p.stem for p in PRESETS_DIR.glob("*.json"))) or "none"
            raise PresetError(f"no preset named {str(name_or_file)!r} (presets: {names})")
    try:
        return snapshot.load(path)
    except snapshot.SnapshotError as exc:
        raise PresetError(f"preset {path.name}: {exc}") from None


def _setup_from_link() -> tuple[Setup | None, list[str]]:
    """The setup carried by this session's ``?s=``, and any notice about it."""
    args = pn.state.session_args if pn.state.curdoc is not None else {}
    values = args.get(urlstate.QUERY_KEY) if args else None
    if not values or not values[0]:
        return None, []
    try:
        return urlstate.decode_setup(values[0]), []
    except urlstate.UrlStateError as exc:
        return None, [f"{exc}; showing the starting setup instead."]


def create_app(setup: Setup | None = None) -> Dashboard:
    """A new dashboard for one session (or one notebook cell).

    Parameters
    ----------
    setup
        The setup to start on; the default preset when None. A setup in the
        page address (``?s=``) takes precedence when the app is served.
    """
    linked, messages = _setup_from_link()
    start = linked or setup or load_preset(None)
    return Dashboard(start, presets=list_presets(), messages=messages)


if __name__.startswith("bokeh"):
    create_app().servable(title="fringebench")
