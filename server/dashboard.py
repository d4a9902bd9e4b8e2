"""One session's dashboard: its setup, its last good result and its display settings.

Every edit goes through :meth:`Dashboard.set_value` (or one of the element
operations): the change is applied to a copy of the setup and checked there,
then either committed (and a computation requested) or refused with a plain
message, leaving everything as it was. Computations run on a worker thread;
only the newest request is applied, and a failed one leaves the last good
result on screen. Display settings (scale, colour map, the cut point) never
start a computation.
"""

from __future__ import annotations

import base64
import contextlib
import datetime as _dt
import functools
import html
import io
import json
import logging
import math
import re
import threading
from collections.abc import Callable
from concurrent.futures import Future
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import panel as pn
import param

import compute
from compute import engine, snapshot
from compute.errors import SetupError
from compute.model import ELEMENT_TYPES, Element, Setup
from compute.pngdata import PngDataError, decode_png_data_url
from server import (
    alongz_view,
    camera_panel,
    controls,
    cutplot,
    mapplot,
    sharing,
    sweep_panel,
    urlstate,
    views,
    wording,
)
from server.controls import SHAPE_LABELS, ElementEditor, SetupControls, to_display

__all__ = ["MAX_UPLOAD_BYTES", "Dashboard"]

log = logging.getLogger("fringebench.dashboard")

#: Largest snapshot file accepted by the import button.
MAX_UPLOAD_BYTES = snapshot.MAX_SNAPSHOT_BYTES
SAFETY_TEXT = (
    "Laser safety: a computed irradiance is no safety assessment. Follow the "
    "applicable laser-safety standard and your local laser safety officer."
)
_ASSETS = Path(__file__).resolve().parent / "assets"
#: The first tab under the map: the cuts, the aperture and the validity report.
SCREEN_TAB_TITLE = "Cuts, aperture, validity"
_PATH = re.compile(r"^(source|screen|numerics|aperture)(?:\.elements\[(\d+)\])?\.(\w+)$")

# Computations run on the server-wide queue (server.sharing.COMPUTE_QUEUE): bounded
# lanes and a memory budget shared by every session; a session computes one setup at a time.


def _stylesheet() -> str:
    path = _ASSETS / "fringebench.css"
    return path.read_text(encoding="utf-8") if path.exists() else ""


_CSS = _stylesheet()
# The dark theme leaves the chosen tab's title light on light; ours reads on the dark page.
_TABS_CSS = """
:host .bk-tab { color: #8892a6; background-color: transparent; border-color: #2a3244; }
:host .bk-tab.bk-active { color: #f5a623; background-color: #161b26; border-color: #f5a623; }
"""


def _html(text: str, **kw: Any) -> pn.pane.HTML:
    """An HTML pane styled with our stylesheet (panes render in their own shadow root)."""
    return pn.pane.HTML(text, stylesheets=[_CSS], **kw)


def clone(setup: Setup) -> Setup:
    """An independent copy of ``setup`` (through the snapshot format)."""
    return snapshot.from_dict(snapshot.to_dict(setup))


def _aperture_key(setup: Setup) -> str:
    """What the aperture preview depends on (the window matters for unbounded elements)."""
    doc = snapshot.to_dict(setup)
    return json.dumps([doc["aperture"], setup.screen.width, setup.screen.height], sort_keys=True)


def _work(setup: Setup, shown_aperture: str | None) -> tuple[Any, Any, str]:
    """The worker's job: the screen result, and the aperture preview when it changed."""
    key = _aperture_key(setup)
    preview = engine.aperture_preview(setup, n=256) if key != shown_aperture else None
    return engine.compute(setup), preview, key


def _read_snapshot(data: bytes | str, name: str) -> tuple[Setup, bool, str]:
    """The worker's part of an import: parse and check, the address length, the key.

    Runs off the event loop (a large snapshot takes seconds to read). Returns the
    setup, whether it is too large for the page address, and its physics hash.
    """
    setup = snapshot.loads(data, source=name)
    too_long = len(urlstate.encode_setup(setup)) > urlstate.MAX_QUERY_CHARS
    return setup, too_long, snapshot.physics_hash(setup)


def failure_message(exc: BaseException) -> str:
    """A plain sentence for a failed computation (no traceback for the user).

    Settings are named by the labels the user sees, not by their snapshot paths.
    """
    if isinstance(exc, SetupError):
        return wording.plain(str(exc), controls.path_label)
    if isinstance(exc, snapshot.SnapshotError):
        return wording.plain(
            "; ".join(f"{p}: {m}" if p else m for p, m in exc.errors), controls.path_label
        )
    if isinstance(exc, MemoryError):
        return "the computation ran out of memory; lower “Pixels across” or the aperture grid"
    return f"internal error while computing ({type(exc).__name__}: {exc})"


class Dashboard(pn.viewable.Viewer):
    """The dashboard of one session.

    Parameters
    ----------
    setup
        The setup to start on (copied); the model defaults when None.
    presets
        ``{title: path}`` of the presets that the picker offers.
    threaded
        Compute on the worker pool (True) or in the calling thread (False).
    messages
        Notices to show once the page has loaded (e.g. a bad link).
    """

    setup = param.ClassSelector(class_=Setup, doc="The committed setup of this session.")
    result = param.Parameter(default=None, doc="The last good result (compute.engine.Result).")
    scale = param.Selector(default="linear", objects=["linear", "log"], doc="Irradiance scale.")
    cmap = param.Selector(default="inferno", objects=list(views.COLOUR_MAPS), doc="Colour map.")
    cut_x = param.Number(default=0.0, doc="x of the vertical cut, m.")
    cut_y = param.Number(default=0.0, doc="y of the horizontal cut, m.")
    busy = param.Boolean(default=False, doc="A computation is running.")
    computations = param.Integer(default=0, doc="Computations started in this session.")
    results_applied = param.Integer(default=0, doc="Results put on screen in this session.")
    last_error = param.String(default="", doc="The last failure, in plain words.")
    selected = param.Integer(default=0, doc="Index of the element shown in the editor.")

    def __init__(
        self,
        setup: Setup | None = None,
        *,
        presets: dict[str, Path] | None = None,
        threaded: bool = True,
        messages: list[str] | None = None,
        **params: Any,
    ):
        initial = clone(setup) if setup is not None else Setup()
        super().__init__(setup=initial, **params)
        self._threaded = threaded
        self._presets = dict(presets or {})
        self._doc = pn.state.curdoc
        in_session = self._doc is not None and self._doc.session_context is not None
        self._location = pn.state.location if in_session else None
        self._notifications = pn.state.notifications if in_session else None
        self._lock = threading.Lock()
        self._cancel: threading.Event | None = None  # stops the running job for a newer one
        self._reading: str | None = None  # the file being imported off the event loop
        self._url_too_long: Setup | None = None  # a setup known to be too long for the URL
        self._key_memo: tuple[Setup | None, str] = (None, "")
        self._wanted: Setup | None = None
        self._running = False
        self._idle = threading.Event()
        self._idle.set()
        self._result_setup: Setup | None = None
        self._preview = None
        self._shown_aperture: str | None = None
        self._closed = views.ClosedForm(None, "")
        self._map_data = None
        self._pending_messages = list(messages or [])
        # Follow mode (server.sharing): the link while this session mirrors a shared one,
        # and this session's turn in the compute and screen queues (lower goes first).
        self.following: Any = None
        self.priority: int = sharing.PRIORITY_OTHER
        self._preview_shown: tuple | None = None
        self.messages: list[tuple[str, str]] = []  # (level, text), newest last
        # Extension panels (their own modules) plug in here; see _build_widgets.
        self.result_hooks: list[Callable[[Setup, Any], None]] = []
        self.setup_hooks: list[Callable[[Setup], None]] = []
        self.view_hooks: list[Callable[[dict], None]] = []
        self.view_extra: dict[str, Any] = {}
        self.state_extra: dict[str, str] = {}
        self._plots_built = False
        # The map moves to the screen window with the next result (a load, an element
        # added or deleted; a changed window always moves it).
        self._reframe = True
        self._applying_view = False
        self._url_warned = False
        # The preset the setup came from (its title and physics hash), and whether the
        # user has changed it since; the failure that the problem bar shows.
        self._preset_hashes: dict[str, str] = {}
        self.preset_loaded: str | None = None
        self.preset_edited = False
        self._own_meta = False
        self._failure_said = ""
        self._dismissed: set[str] = set()
        self._fix: wording.Fix | None = None
        self._build_widgets()
        self._match_preset(initial)
        self._apply_view(initial.view)
        self._structure: tuple = ()
        self._refresh_controls()
        self.param.watch(self._display_changed, ["scale", "cmap"])
        self._request_compute()
        if self._doc is not None and self._doc.session_context is not None:
            pn.state.onload(self._on_page_loaded)

    # ------------------------------------------------------------------ messages

    def notify(self, level: str, text: str) -> None:
        """Show a notification (``error``, ``warning``, ``info``, ``success``)."""
        self.messages.append((level, text))
        area = self._notifications
        if area is not None:
            duration = 10000 if level == "error" else 5000
            getattr(area, level)(html.escape(text), duration=duration)

    def _on_page_loaded(self) -> None:
        self._mirror_url()  # the browser's own address arrives on load; set ours after it
        self._show_pending_messages()

    def _show_pending_messages(self) -> None:
        for text in self._pending_messages:
            self.notify("error", text)
        self._pending_messages = []

    # ------------------------------------------------------------------- editing

    def _range_message(self, path: str, p: param.Number, value: float | None) -> str:
        """Why ``value`` (SI) is refused, in the words and unit of the control that edits it."""
        c = self._controls_by_path.get(path)
        if c is not None:
            shown = None if value is None else (value if c.integer else to_display(value, c.unit))
            text = c.check(shown, c.shown)
            if text is not None:
                return text
        lo, hi = p.bounds or (None, None)
        unit = (p.metadata or {}).get("unit", "")
        return (
            wording.refusal(
                controls.path_label(path),
                unit,
                value,
                lo,
                hi,
                lower_open=not p.inclusive_bounds[0],
                upper_open=not p.inclusive_bounds[1],
            )
            or f"{controls.path_label(path)}: {value} is refused"
        )

    def _resolve(self, setup: Setup, path: str) -> tuple[param.Parameterized, str]:
        m = _PATH.match(path)
        if m is None:
            raise ValueError(f"{path}: no such setting")
        section, index, name = m.groups()
        obj = getattr(setup, section)
        if index is not None:
            els = setup.aperture.elements
            if int(index) >= len(els):
                raise ValueError(f"{path}: there is no element {int(index) + 1}")
            obj = els[int(index)]
        if name not in obj.param or name == "name":
            raise ValueError(f"{path}: no such setting")
        return obj, name

    def _convert(self, path: str, name: str, value: Any) -> Any:
        """Turn editor payloads (vertex text, PNG bytes) into model values."""
        if name == "vertices" and isinstance(value, str):
            try:
                return controls.parse_vertices(value)
            except ValueError as exc:
                raise ValueError(f"{path}: {exc}") from None
        if name == "data" and isinstance(value, (bytes, bytearray)):
            url = "data:image/png;base64," + base64.b64encode(bytes(value)).decode("ascii")
            try:
                decode_png_data_url(url)
            except PngDataError as exc:
                raise ValueError(f"{path}: {exc}") from None
            return url
        return value

    def set_value(self, path: str, value: Any) -> bool:
        """Set one setting (SI units) if the setup stays valid; else say why and keep all.

        Returns True when the change was committed.
        """
        if self._read_only():  # follow mode hook: a follower's setup is the shared one
            return False
        try:
            candidate = clone(self.setup)
            obj, name = self._resolve(candidate, path)
            value = self._convert(path, name, value)
            p = obj.param[name]
            if isinstance(p, param.Number):
                missing = value is None and not p.allow_None
                if missing or (isinstance(value, float) and not math.isfinite(value)):
                    raise ValueError(self._range_message(path, p, None))
            if (
                isinstance(p, param.Number)
                and isinstance(value, (int, float))
                and not isinstance(value, bool)
            ):
                lo, hi = p.bounds or (None, None)
                low_ok = lo is None or (value >= lo if p.inclusive_bounds[0] else value > lo)
                high_ok = hi is None or (value <= hi if p.inclusive_bounds[1] else value < hi)
                if not (low_ok and high_ok):
                    raise ValueError(self._range_message(path, p, value))
            try:
                setattr(obj, name, value)
            except ValueError as exc:
                raise ValueError(f"{path}: {exc}") from None
            problems = candidate.check()
            if problems:
                raise ValueError("; ".join(f"{pp}: {mm}" for pp, mm in problems))
        except ValueError as exc:
            self._reject(str(exc), path=path)
            return False
        self._commit(candidate)
        return True

    def _reject(self, text: str, *, path: str | None = None) -> None:
        """Say why a change is refused (in the page's words) and show the committed values."""
        self.notify("error", wording.plain(text, controls.path_label))
        self._refresh_controls()
        c = self._controls_by_path.get(path) if path else None
        if c is not None:
            c.restore()

    def _edit(self, change: Callable[[Setup], None], *, select: int | None = None) -> bool:
        """Apply ``change`` to a copy of the setup; commit it when the copy checks out."""
        if self._read_only():  # follow mode hook
            return False
        candidate = clone(self.setup)
        try:
            change(candidate)
        except (ValueError, IndexError) as exc:
            self._reject(str(exc))
            return False
        problems = candidate.check()
        if problems:
            self._reject("; ".join(f"{p}: {m}" for p, m in problems))
            return False
        if select is not None:
            self.selected = max(0, min(select, len(candidate.aperture.elements) - 1))
        self._commit(candidate)
        return True

    def add_element(self, shape: str) -> bool:
        """Append a new element of ``shape`` (model defaults) and select it."""
        if shape not in ELEMENT_TYPES:
            self._reject(f"unknown shape {shape!r}")
            return False

        def change(s: Setup) -> None:
            s.aperture.elements = [*s.aperture.elements, ELEMENT_TYPES[shape]()]

        return self._reframing_edit(change, select=len(self.setup.aperture.elements))

    def duplicate_element(self, index: int) -> bool:
        """Insert a copy of element ``index`` right after it."""

        def change(s: Setup) -> None:
            els = list(s.aperture.elements)
            copy_ = clone_element(els[index])
            s.aperture.elements = [*els[: index + 1], copy_, *els[index + 1 :]]

        return self._reframing_edit(change, select=index + 1)

    def remove_element(self, index: int) -> bool:
        """Delete element ``index``."""

        def change(s: Setup) -> None:
            els = list(s.aperture.elements)
            if not 0 <= index < len(els):
                raise IndexError(f"there is no element {index + 1}")
            del els[index]
            s.aperture.elements = els

        return self._reframing_edit(change, select=max(0, index - 1))

    def _reframing_edit(self, change: Callable[[Setup], None], *, select: int) -> bool:
        """An edit after which the map opens on the screen window again (add, delete)."""
        before = self._reframe
        self._reframe = True
        ok = self._edit(change, select=select)
        if not ok:
            self._reframe = before
        return ok

    def move_element(self, index: int, step: int) -> bool:
        """Move element ``index`` by ``step`` places in the painting order."""
        n = len(self.setup.aperture.elements)
        target = index + step
        if not (0 <= index < n and 0 <= target < n):
            return False

        def change(s: Setup) -> None:
            els = list(s.aperture.elements)
            els[index], els[target] = els[target], els[index]
            s.aperture.elements = els

        return self._edit(change, select=target)

    def load(self, setup: Setup, *, origin: str = "setup", preset: str | None = None) -> None:
        """Replace the whole setup (a preset, an import, a link); the view follows it."""
        if self._read_only():  # follow mode hook
            return
        self.selected = 0
        self._reframe = True  # the map opens on the new window
        self._own_meta = False
        self.preset_loaded = None  # until the new setup is in place
        # A display setting the snapshot leaves out takes its default, not the last one's.
        view = {"scale": self.param["scale"].default, "cmap": self.param["cmap"].default}
        self._commit(clone(setup), view=view | dict(setup.view or {}))
        self._match_preset(self.setup, preset)
        self.notify("info", f"Loaded {origin}.")

    # ------------------------------------------------------------------ presets

    def _preset_hash(self, title: str) -> str | None:
        if title not in self._preset_hashes:
            try:
                self._preset_hashes[title] = snapshot.physics_hash(
                    snapshot.load(self._presets[title])
                )
            except (snapshot.SnapshotError, OSError, KeyError):
                return None
        return self._preset_hashes[title]

    def _match_preset(self, setup: Setup, title: str | None = None) -> None:
        """Note which preset ``setup`` is (by the title it carries, or ``title``), if any."""
        title = title or str((setup.meta or {}).get("title") or "")
        self.preset_loaded = title if title in self._presets else None
        if self.preset_loaded is not None:
            self.preset_edited = self._preset_hash(title) != snapshot.physics_hash(setup)
        else:
            self.preset_edited = False
        self._show_preset()

    def _follow_edits(self) -> None:
        """After a committed change: is the setup still the preset it was loaded from?"""
        if self.preset_loaded is None:
            return
        edited = self._preset_hash(self.preset_loaded) != snapshot.physics_hash(self.setup)
        if edited != self.preset_edited:
            self.preset_edited = edited
            self._show_preset()

    def _picker_options(self) -> dict[str, str]:
        opts = {t: t for t in self._presets}
        if self.preset_loaded is None:
            return {"(own setup: choose a preset)": ""} | opts
        if self.preset_edited:
            return {f"{self.preset_loaded} (edited)": ""} | opts
        return opts

    def _export_meta(self) -> tuple[str, str]:
        """The title and note an export would carry, unless the user wrote their own."""
        meta = self.setup.meta or {}
        title, note = str(meta.get("title", "")), str(meta.get("note", ""))
        if self.preset_loaded is not None and self.preset_edited:
            title = f"edited from: {self.preset_loaded}"
            note = (
                f"Changed after loading the preset “{self.preset_loaded}”; the preset's "
                "note does not describe this setup."
            )
        return title, note

    def _show_preset(self) -> None:
        """The chooser, the note on the page and the export's title and note."""
        if not hasattr(self, "preset_picker"):
            return
        self._picker_muted = True
        try:
            self.preset_picker.options = self._picker_options()
            value = "" if self.preset_loaded is None or self.preset_edited else self.preset_loaded
            self.preset_picker.value = value
        finally:
            self._picker_muted = False
        meta = self.setup.meta or {}
        if self.preset_loaded is not None:
            note = str(meta.get("note", "")) if not self.preset_edited else ""
            if self.preset_edited:
                original = self._preset_note(self.preset_loaded)
                text = (
                    f'<span class="fb-preset-edited">edited from:</span> '
                    f"<b>{html.escape(self.preset_loaded)}</b>"
                    + (
                        f" · <span class='fb-note'>{html.escape(original)}</span>"
                        if original
                        else ""
                    )
                )
            else:
                text = f"<b>{html.escape(self.preset_loaded)}</b>" + (
                    f" · {html.escape(note)}" if note else ""
                )
            self.preset_note.object = f'<div class="fb-preset-note-text">{text}</div>'
            self.preset_note.visible = True
        else:
            self.preset_note.object = ""
            self.preset_note.visible = False
        if not self._own_meta:
            title, note = self._export_meta()
            self._meta_muted = True
            try:
                self.title_input.value = title
                self.note_input.value = note
            finally:
                self._meta_muted = False

    def _preset_note(self, title: str) -> str:
        try:
            return str(snapshot.load(self._presets[title]).meta.get("note", ""))
        except (snapshot.SnapshotError, OSError, KeyError):
            return ""

    def _meta_typed(self, _event: param.parameterized.Event) -> None:
        if not getattr(self, "_meta_muted", False):
            self._own_meta = True

    def _commit(self, candidate: Setup, *, view: dict | None = None) -> None:
        self.setup = candidate
        self._follow_edits()
        if view is not None:
            self._apply_view(view)
        if self._threaded:
            # The worker computes while the controls, the panels and the address follow.
            self._request_compute()
        self._refresh_controls()
        self._run_setup_hooks()
        self._mirror_url()
        if not self._threaded:
            self._request_compute()

    def _run_setup_hooks(self) -> None:
        for hook in self.setup_hooks:
            try:
                hook(self.setup)
            except Exception:  # a panel's failure must not cost the session its setup
                log.exception("a setup hook failed")

    def _run_result_hooks(self) -> None:
        setup = self._result_setup if self._result_setup is not None else self.setup
        for hook in self.result_hooks:
            try:
                hook(setup, self.result)
            except Exception:
                log.exception("a result hook failed")

    # ----------------------------------------------------------- import, export

    def export_snapshot(self) -> str:
        """The current setup and view as version-1 snapshot JSON text."""
        s = clone(self.setup)
        meta = dict(s.meta)
        title, note = self.title_input.value.strip(), self.note_input.value.strip()
        for key, value in (("title", title), ("note", note)):
            if value:
                meta[key] = value
            else:
                meta.pop(key, None)
        meta["created"] = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
        meta["app_version"] = compute.__version__
        s.meta = meta
        s.view = self.view_state()
        return snapshot.dumps(s)

    def import_snapshot(self, data: bytes | str, *, name: str = "the uploaded file") -> bool:
        """Load a snapshot; on any problem say what is wrong and change nothing."""
        size = len(data)
        if size > MAX_UPLOAD_BYTES:
            self.notify(
                "error",
                f"{name} is {size / 2**20:.1f} MB; a snapshot is at most "
                f"{MAX_UPLOAD_BYTES // 2**20} MB",
            )
            return False
        if self._threaded and self._doc is not None and self._doc.session_context is not None:
            return self._import_off_loop(data, name)  # nothing of its size on the event loop
        try:
            setup = snapshot.loads(data, source=name)
        except snapshot.SnapshotError as exc:
            listed = [f"{p}: {m}" if p else m for p, m in exc.errors[:8]]
            more = f" (and {len(exc.errors) - 8} more)" if len(exc.errors) > 8 else ""
            self.notify("error", f"{name} was not loaded: " + "; ".join(listed) + more)
            return False
        self.load(setup, origin=name)
        return True

    def _import_off_loop(self, data: bytes | str, name: str) -> bool:
        """Read the snapshot on a worker thread; the session shows it is busy meanwhile."""
        if self._read_only() or self._reading is not None:
            if self._reading is not None:
                self.notify("warning", f"still reading {self._reading}; try again when it is in")
            return False
        self._reading = name
        self.busy = True
        self._update_state()
        fut = sharing.offload(functools.partial(_read_snapshot, data, name))
        fut.add_done_callback(lambda f: self._schedule(lambda: self._imported(name, f)))
        return True

    def _commit_in_steps(self, setup: Setup) -> None:
        """:meth:`_commit` over several turns of the event loop, computation first.

        Rebuilding the controls and the panels of a large setup takes the shared
        loop a while; in separate turns, queued after every session's screen
        result, other sessions' messages, results and pages are served in between.
        """
        self.setup = setup
        self._apply_view(setup.view)
        self._request_compute()
        self._update_state()
        steps = [self._refresh_controls, self._run_setup_hooks, self._mirror_url]
        doc = self._doc

        def next_step() -> None:
            if self.setup is not setup:
                return  # a newer edit has committed (and refreshed) meanwhile
            models = getattr(doc, "models", None)
            # One recomputation of the document's model graph per step, not one per widget.
            with models.freeze() if hasattr(models, "freeze") else contextlib.nullcontext():
                steps.pop(0)()
            if steps and not sharing.run_in_session(doc, next_step, later):
                steps.clear()

        # After every session's screen result, like background work.
        later = self.priority + sharing.PRIORITY_BACKGROUND
        sharing.run_in_session(doc, next_step, later)

    def _imported(self, name: str, fut: Future) -> None:
        """Back on the session's document: adopt the setup read off the loop, or say why not."""
        self._reading = None
        exc = fut.exception()
        if exc is None:
            setup, too_long, key = fut.result()
            if not self._read_only():
                self._url_too_long = setup if too_long else None
                self._key_memo = (setup, key)
                self.selected = 0
                self._commit_in_steps(setup)  # freshly read: nobody else holds it
                self.notify("info", f"Loaded {name}.")
                return
        elif isinstance(exc, snapshot.SnapshotError):
            listed = [f"{p}: {m}" if p else m for p, m in exc.errors[:8]]
            more = f" (and {len(exc.errors) - 8} more)" if len(exc.errors) > 8 else ""
            self.notify("error", f"{name} was not loaded: " + "; ".join(listed) + more)
        else:
            log.error("reading a snapshot failed", exc_info=exc)
            self.notify("error", f"{name} was not loaded: {failure_message(exc)}")
        with self._lock:
            running = self._running
        if not running:
            self.busy = False
            self._set_busy_view(False)
            self._update_state()

    # -------------------------------------------------------------- view state

    def view_state(self) -> dict[str, Any]:
        """The display settings as the snapshot's ``view`` section."""
        state = {"scale": self.scale, "cmap": self.cmap, "cut": [self.cut_x, self.cut_y]}
        state.update(self.view_extra)
        return state

    def _apply_view(self, view: dict) -> None:
        self._applying_view = True
        try:
            if view.get("scale") in self.param["scale"].objects:
                self.scale = view["scale"]
            if view.get("cmap") in self.param["cmap"].objects:
                self.cmap = view["cmap"]
            cut = view.get("cut")
            if (
                isinstance(cut, list)
                and len(cut) == 2
                and all(isinstance(c, (int, float)) and math.isfinite(c) for c in cut)
            ):
                self.cut_x, self.cut_y = float(cut[0]), float(cut[1])
            else:
                self.cut_x, self.cut_y = self.setup.screen.x, self.setup.screen.y
            for hook in self.view_hooks:
                hook(view)
        finally:
            self._applying_view = False

    def _mirror_url(self) -> None:
        if self._location is None:
            return
        if self._url_too_long is self.setup:  # known too long: encode nothing on the loop
            self._location.update_query(s="")
            return
        s = clone(self.setup)
        s.view = self.view_state()
        value = urlstate.encode_setup(s)
        if len(value) > urlstate.MAX_QUERY_CHARS:
            self._url_too_long = self.setup
            self._location.update_query(s="")
            if not self._url_warned:
                self._url_warned = True
                self.notify(
                    "warning",
                    "This setup is too large for the page address; use Export to share it.",
                )
            return
        self._location.update_query(s=value)

    def _display_changed(self, event: param.parameterized.Event) -> None:
        # Display only: redraw from the result at hand, compute nothing.
        if self._plots_built:
            if event.name == "scale":
                self._build_plots()
            else:
                self._map_plot.set_cmap(self.cmap)
            self._update_state()
        if not self._applying_view:
            self._mirror_url()

    def set_cut(self, x: float, y: float) -> None:
        """Move the cross-sections through (x, y), m (a click on the map)."""
        self.cut_x, self.cut_y = float(x), float(y)
        if self._plots_built:
            self._send_cuts()
            self._update_state()
        self._mirror_url()

    # ----------------------------------------------------------------- compute

    def _request_compute(self) -> None:
        with self._lock:
            self._wanted = self.setup
            self._idle.clear()
            if self._running:
                if self._cancel is not None:
                    self._cancel.set()  # the older request stops between its screens
                return  # the running job picks up the newest setup when it ends
            self._running = True
        self.busy = True
        self._start(self.setup)

    def _start(self, setup: Setup) -> None:
        self.computations += 1
        if not self._threaded:
            fut: Future = Future()
            try:
                fut.set_result(_work(setup, self._shown_aperture))
            except Exception as exc:
                fut.set_exception(exc)
            self._finish(setup, fut)
            return
        job = functools.partial(_work, setup, self._shown_aperture)
        self._cancel = cancel = threading.Event()
        fut = sharing.COMPUTE_QUEUE.submit(setup, job, priority=self.priority, cancel=cancel)
        fut.add_done_callback(lambda f: self._schedule(lambda: self._finish(setup, f)))

    def _schedule(self, callback: Callable[[], None]) -> None:
        """Run ``callback`` where the session's models may be changed."""
        # Queue hook: results reach the screens of all sessions in turn (server.sharing).
        if not sharing.run_in_session(self._doc, callback, self.priority):
            log.debug("session closed before a result arrived")

    def _finish(self, setup: Setup, fut: Future) -> None:
        with self._lock:
            newer = self._wanted is not setup
            if not newer:
                self._running = False
        if newer:
            self._start(self._wanted)  # coalesce: only the newest request is applied
            return
        exc = fut.exception()
        if self.following is not None:
            pass  # follow mode hook: the shared session's result is shown, not this one
        elif exc is not None:
            if not isinstance(exc, (SetupError, snapshot.SnapshotError, MemoryError)):
                log.error("computation failed", exc_info=exc)
            self.last_error = failure_message(exc)
            self._show_failure(exc)
        else:
            result, preview, aperture_key = fut.result()
            self.last_error = ""
            self._show_failure(None)
            self._result_setup = setup
            self._preview = preview
            self._shown_aperture = aperture_key
            self._closed = views.closed_form(setup, result.plan.method, result.plan.variant)
            if not self._cut_inside(result):
                self.cut_x, self.cut_y = (
                    float(np.mean(result.x[[0, -1]])),
                    float(np.mean(result.y[[0, -1]])),
                )
            self.result = result
            self.results_applied += 1
            self._show_result()
        with self._lock:
            # A request may have started a new job since this one was marked done;
            # then the session is still busy and waiting callers keep waiting.
            idle = not self._running
            if idle:
                self._idle.set()
        if idle:
            self.busy = False
            self._set_busy_view(False)

    def _show_failure(self, exc: BaseException | None) -> None:
        """The problem bar: the failure in plain words and its fix, or nothing.

        A failure is announced once: the same failure after a later edit keeps the
        bar up but raises no new notification, and one the user dismissed or fixed
        is not raised again until another one comes.
        """
        if exc is None:
            self.problem_bar.visible = False
            self._fix = None
            self._failure_said = ""
            return
        text = self.last_error
        path = getattr(exc, "path", "") if isinstance(exc, SetupError) else ""
        raw = str(exc) if isinstance(exc, SetupError) else ""
        self._fix = wording.fix_for(path, raw, int(self.setup.numerics.grid))
        if self._fix is None and isinstance(exc, MemoryError) and self.setup.numerics.grid:
            self._fix = wording.Fix("Set grid to automatic", "numerics.grid", 0)
        self.fix_button.name = self._fix.label if self._fix else ""
        self.fix_button.visible = self._fix is not None
        self.problem_text.object = (
            f'<div class="fb-problem-text">The last computation failed, the last good '
            f"result stays: {html.escape(text)}</div>"
        )
        # The same failure with other numbers in it (a size, a sample count) is the same.
        sig = f"{path}|" + re.sub(r"\d[\d.,×e+-]*", "#", text)
        if sig == self._failure_said or sig in self._dismissed:
            return  # said once already; the bar (if not dismissed) still shows it
        self._failure_said = sig
        self.problem_bar.visible = True
        self.notify("error", f"Computation failed, the last good result stays: {text}")

    def _apply_fix(self) -> None:
        """The fix button: change the setting it names (through the usual checks)."""
        fix = getattr(self, "_fix", None)
        if fix is None:
            return
        self.problem_bar.visible = False
        self.set_value(fix.path, fix.value)

    def _dismiss_failure(self) -> None:
        """The dismiss button: hide the bar; this failure is not raised again."""
        self.problem_bar.visible = False
        if self._failure_said:
            self._dismissed.add(self._failure_said)

    def _cut_inside(self, result: Any) -> bool:
        return bool(
            result.x[0] <= self.cut_x <= result.x[-1] and result.y[0] <= self.cut_y <= result.y[-1]
        )

    def wait(self, timeout: float = 120.0) -> bool:
        """Block until no computation is pending (for tests and scripts)."""
        return self._idle.wait(timeout)

    # ------------------------------------------------------------------ widgets

    def _build_widgets(self) -> None:
        self.controls = SetupControls(self.set_value)
        self._controls_by_path: dict[str, controls.QuantityControl] = {}
        for c in [*self.controls.source.values(), *self.controls.screen.values()]:
            self._controls_by_path[c.path] = c
        self._controls_by_path[self.controls.grid.path] = self.controls.grid

        self.preset_picker = pn.widgets.Select(
            label="Preset",
            options={"(choose a preset)": "", **{t: t for t in self._presets}},
            value="",
            css_classes=["fb-preset"],
            sizing_mode="stretch_width",
        )
        self.preset_picker.param.watch(self._preset_chosen, "value")
        self.preset_note = _html(
            "", css_classes=["fb-preset-note"], sizing_mode="stretch_width", visible=False
        )
        self.title_input = pn.widgets.TextInput(
            name="Title (exported)", css_classes=["fb-meta-title"], sizing_mode="stretch_width"
        )
        self.note_input = pn.widgets.TextAreaInput(
            name="Note (exported)",
            css_classes=["fb-meta-note"],
            sizing_mode="stretch_width",
            height=70,
        )
        self.title_input.param.watch(self._meta_typed, "value")
        self.reading_hint_text = _html("", sizing_mode="stretch_width")
        widen = pn.widgets.Button(
            name="Widen the window ×2", variant="outline", css_classes=["fb-widen"], width=180
        )
        widen.on_click(lambda _e: self.widen_window())
        self.reading_hint = pn.Column(
            self.reading_hint_text,
            widen,
            visible=False,
            sizing_mode="stretch_width",
            css_classes=["fb-reading-hint"],
        )
        self.problem_text = _html("", sizing_mode="stretch_width", css_classes=["fb-problem"])
        self.fix_button = pn.widgets.Button(
            name="", color="warning", css_classes=["fb-fix"], visible=False, width=190
        )
        self.fix_button.on_click(lambda _e: self._apply_fix())
        dismiss = pn.widgets.Button(
            name="Dismiss", variant="outline", css_classes=["fb-dismiss"], width=90
        )
        dismiss.on_click(lambda _e: self._dismiss_failure())
        self.problem_bar = pn.Row(
            self.problem_text,
            self.fix_button,
            dismiss,
            visible=False,
            sizing_mode="stretch_width",
            css_classes=["fb-problem-bar"],
        )
        self.note_input.param.watch(self._meta_typed, "value")
        self.export_button = pn.widgets.FileDownload(
            callback=lambda: io.StringIO(self.export_snapshot()),
            filename="fringebench-setup.json",
            label="Export snapshot",
            color="primary",
            css_classes=["fb-export"],
            sizing_mode="stretch_width",
        )
        self.import_input = pn.widgets.FileInput(
            accept=".json,application/json",
            css_classes=["fb-import"],
            sizing_mode="stretch_width",
        )
        self.import_input.param.watch(self._file_imported, "value")

        self.scale_switch = pn.widgets.RadioButtonGroup.from_param(
            self.param.scale,
            css_classes=["fb-scale"],
            color="primary",
            variant="outline",
        )
        self.cmap_select = pn.widgets.Select.from_param(
            self.param.cmap, label="Colour map", css_classes=["fb-cmap"], width=140
        )

        # Element table and editor.
        self.element_table = pn.widgets.Tabulator(
            self._elements_frame(),
            disabled=True,
            selectable=1,
            show_index=False,
            layout="fit_data_stretch",
            height=150,
            sizing_mode="stretch_width",
            css_classes=["fb-elements"],
        )
        self.element_table.param.watch(self._table_selected, "selection")
        self.new_shape = pn.widgets.Select(
            options={v: k for k, v in SHAPE_LABELS.items()},
            value="rect",
            css_classes=["fb-new-shape"],
            width=150,
        )

        def button(label: str, css: str, action: Callable[[], Any]) -> pn.widgets.Button:
            b = pn.widgets.Button(label=label, css_classes=[css], variant="outline", width=70)
            b.on_click(lambda _e: action())
            return b

        self.element_buttons = pn.Row(
            self.new_shape,
            button("Add", "fb-add-element", lambda: self.add_element(self.new_shape.value)),
            button("Copy", "fb-copy-element", lambda: self.duplicate_element(self.selected)),
            sizing_mode="stretch_width",
        )
        self.order_buttons = pn.Row(
            button("Up", "fb-up-element", lambda: self.move_element(self.selected, -1)),
            button("Down", "fb-down-element", lambda: self.move_element(self.selected, +1)),
            button("Delete", "fb-delete-element", lambda: self.remove_element(self.selected)),
            sizing_mode="stretch_width",
        )
        self.element_editor = pn.Column(sizing_mode="stretch_width")

        # Views.
        self.map_pane = pn.pane.Bokeh(None, css_classes=["fb-map"])
        self.cut_x_pane = pn.pane.Bokeh(None, sizing_mode="stretch_width", css_classes=["fb-cut-x"])
        self.cut_y_pane = pn.pane.Bokeh(None, sizing_mode="stretch_width", css_classes=["fb-cut-y"])
        self.aperture_pane = pn.pane.Bokeh(None, css_classes=["fb-aperture"])
        self.phase_pane = pn.pane.Bokeh(None, css_classes=["fb-phase"])
        self.numbers_pane = _html("", sizing_mode="stretch_width", css_classes=["fb-numbers-pane"])
        self.validity_pane = _html(
            "", sizing_mode="stretch_width", css_classes=["fb-validity-pane"]
        )
        self.spinner = pn.indicators.LoadingSpinner(
            value=False, size=22, css_classes=["fb-busy"], color="light"
        )
        self.status = _html("", css_classes=["fb-status"], sizing_mode="stretch_width")
        self.state_pane = _html("", css_classes=["fb-state"], height=0, margin=0)
        self.overlay_note = _html("", css_classes=["fb-overlay-note"], sizing_mode="stretch_width")
        # Over the map: the verdict when the result's report says invalid (else hidden).
        self.verdict_banner = _html(
            "", visible=False, css_classes=["fb-verdict"], sizing_mode="stretch_width"
        )
        # Follow mode hook: server.sharing puts the share controls in this row.
        self.share_bar = pn.Row(css_classes=["fb-share-bar"], margin=(4, 10))
        # Slots of the extension panels (see server/*_view.py, *_panel.py).
        self.screen_tab = pn.Column(
            pn.Row(self.cut_x_pane, self.cut_y_pane, sizing_mode="stretch_width"),
            pn.Row(
                self.aperture_pane,
                self.phase_pane,
                sizing_mode="stretch_width",
            ),
            self.validity_pane,
            sizing_mode="stretch_width",
            css_classes=["fb-screen-tab"],
        )
        self.explore_tabs = pn.Tabs(
            (SCREEN_TAB_TITLE, self.screen_tab),
            sizing_mode="stretch_width",
            css_classes=["fb-explore"],
            stylesheets=[_TABS_CSS],
        )
        self.camera_slot = pn.Column(visible=False, css_classes=["fb-camera-slot"])
        self.extra_source_controls = pn.Column(sizing_mode="stretch_width")
        self.camera_controls = pn.Column(sizing_mode="stretch_width")
        # The regime explorer's tabs. The sweep tab comes first: it computes only when
        # asked, while the along-z image follows every change once its tab is open,
        # which on a shared server should be the choice of those who look at it.
        self.sweep_panel = sweep_panel.SweepPanel(self)
        self.alongz_view = alongz_view.AlongZView(self)
        # Spectrum, source size, camera and true colour (built on the widgets above).
        self.source_camera = camera_panel.install(self)
        self.true_colour = self.source_camera.colour
        self.cmap_select = pn.Row(self.cmap_select, self.true_colour.widget, margin=0)

    def _elements_frame(self) -> pd.DataFrame:
        rows = []
        for i, el in enumerate(self.setup.aperture.elements):
            rows.append(
                {
                    "#": i + 1,
                    "shape": el.shape,
                    "centre (µm)": f"{to_display(el.x, 'µm'):.4g}, {to_display(el.y, 'µm'):.4g}",
                    "size": controls.element_summary(el),
                    "t": round(el.transmission, 4),
                    "phase": round(el.phase, 4),
                }
            )
        cols = ["#", "shape", "centre (µm)", "size", "t", "phase"]
        return pd.DataFrame(rows, columns=cols)

    def _refresh_controls(self) -> None:
        """Show the committed setup in every control and the element table."""
        self.controls.refresh(self.setup)
        els = self.setup.aperture.elements
        if els and self.selected >= len(els):
            self.selected = len(els) - 1
        frame = self._elements_frame()
        if not frame.equals(self.element_table.value):
            self.element_table.value = frame
        self._muted_selection = True
        try:
            self.element_table.selection = [self.selected] if els else []
        finally:
            self._muted_selection = False
        structure = (self.selected, tuple(e.shape for e in els))
        if structure != self._structure:
            self._structure = structure
            self._rebuild_editor()
        else:
            for c in self._editor_controls:
                obj, name = self._resolve(self.setup, c.path)
                c.show(getattr(obj, name))

    def _rebuild_editor(self) -> None:
        els = self.setup.aperture.elements
        for path in [p for p in self._controls_by_path if p.startswith("aperture.elements")]:
            del self._controls_by_path[path]
        self._editor_controls: list[controls.QuantityControl] = []
        if not els:
            self.element_editor.objects = [
                pn.pane.Markdown("No elements: add one to shape the aperture.")
            ]
            return
        editor = ElementEditor(self.selected, els[self.selected], self.set_value)
        self._editor_controls = editor.controls
        for c in editor.controls:
            self._controls_by_path[c.path] = c
        self.element_editor.objects = [editor.panel]

    def _table_selected(self, event: param.parameterized.Event) -> None:
        if getattr(self, "_muted_selection", False) or not event.new:
            return
        self.selected = int(event.new[0])
        self._refresh_controls()

    def _preset_chosen(self, event: param.parameterized.Event) -> None:
        if getattr(self, "_picker_muted", False):
            return
        title = event.new
        path = self._presets.get(title) if title else None
        if path is None:  # only titles the server offered are accepted
            return
        try:
            setup = snapshot.load(path)
        except snapshot.SnapshotError as exc:
            self.notify("error", f"preset {title} could not be read: {exc}")
            return
        self.load(setup, origin=f"preset “{title}”", preset=title)

    def _file_imported(self, event: param.parameterized.Event) -> None:
        if event.new is None:
            return
        name = self.import_input.filename or "the uploaded file"
        self.import_snapshot(event.new, name=name)

    # ------------------------------------------------------------------- views

    def _build_plots(self) -> None:
        """Create the plots once; the cuts again when the scale changes (their axis type).

        The map and the aperture previews are plain Bokeh figures updated in place
        (server.mapplot), each with ranges of its own.
        """
        if getattr(self, "_map_plot", None) is None:
            self._map_plot = mapplot.MapPlot(scale=self.scale, cmap=self.cmap, on_tap=self._tapped)
            self.map_pane.object = self._map_plot.figure
        else:
            self._map_plot.set_scale(self.scale)
        # The cuts are plain Bokeh figures updated in place (server.cutplot).
        self._cut_plots = {a: cutplot.CutPlot(a, scale=self.scale) for a in ("x", "y")}
        self.cut_x_pane.object = self._cut_plots["x"].figure
        self.cut_y_pane.object = self._cut_plots["y"].figure
        self._plots_built = True
        self._send_map()
        self._send_cuts()

    def _tapped(self, x: float, y: float) -> None:
        """A click on the map at (x, y) mm: Bokeh calls this under the document lock."""
        if x is None or y is None or not (math.isfinite(x) and math.isfinite(y)):
            return
        self.set_cut(x * 1e-3, y * 1e-3)

    def _show_result(self) -> None:
        """Put the result on the page: the pictures first, the readings a tick later.

        The map, the cuts, the aperture previews, the panels' hooks and the state go
        to the browser in one message; the readings (which take a few tens of ms to
        read off the map) follow in the next tick, so the map is not kept waiting.
        The state's ``data-numbers`` is the key of the result whose readings show.
        """
        r = self.result
        self._map_data = (r.x, r.y, r.intensity)  # the map figure sends it as float32
        with pn.io.hold(self._doc):
            if not self._plots_built:
                self._build_plots()
            self._send_map(fresh=True)
            self._send_cuts()
            if self._preview is not None:
                self._send_aperture(self._preview)
                self._preview = None
            self._run_result_hooks()
            self._update_state()
        if self._doc is not None and self._doc.session_context is not None:
            self._doc.add_next_tick_callback(functools.partial(self._show_numbers, r))
        else:
            self._show_numbers(r)

    def _show_numbers(self, r: Any) -> None:
        """The readings and the validity card of result ``r`` (unless a newer one shows)."""
        if r is not self.result:
            return  # the newer result shows its own readings
        meta = dict(r.meta())
        meta["cached"] = bool(getattr(r, "cached", False))
        meta.setdefault("reasons", list(getattr(r.plan, "reasons", [])))
        meta["elapsed_s"] = float(getattr(r, "elapsed_s", meta.get("elapsed_s", 0.0)))
        numbers = views.read_numbers(r.x, r.y, r.intensity, r.power_in)
        with pn.io.hold(self._doc):
            card = views.numbers_card(numbers, meta, cut_label=self._closed.label)
            if card != self.numbers_pane.object:
                self.numbers_pane.object = card
            self._show_reading_hint(numbers)
            validity = views.validity_card([v.to_dict() for v in r.validity])
            if validity != self.validity_pane.object:
                self.validity_pane.object = validity
            banner = views.verdict_banner(r.plan)
            if banner != self.verdict_banner.object:
                self.verdict_banner.object = banner
            self.verdict_banner.visible = bool(banner)
            self._numbers_key = r.key
            self._update_state()

    def _show_reading_hint(self, numbers: dict) -> None:
        """Say which readings the window cannot give, with a button that widens it."""
        missing = wording.missing_readings(numbers)
        self.reading_hint.visible = bool(missing)
        if missing:
            text = "; ".join(missing).capitalize() + "."
            self.reading_hint_text.object = f'<div class="fb-hint">{html.escape(text)}</div>'

    def widen_window(self, factor: float = 2.0) -> bool:
        """Make the screen window ``factor`` times wider and taller (the hint's button)."""

        def change(s: Setup) -> None:
            s.screen.width = float(f"{s.screen.width * factor:.12g}")
            s.screen.height = float(f"{s.screen.height * factor:.12g}")

        return self._edit(change)

    def _send_aperture(self, preview: tuple) -> None:
        """Show a new aperture preview, updating the plots in place once they exist."""
        self._preview_shown = preview  # follow mode hook: what a new follower is sent
        if getattr(self, "_aperture_views", None) is None:
            self._aperture_views = mapplot.ApertureViews()
            self.aperture_pane.object = self._aperture_views.amplitude
            self.phase_pane.object = self._aperture_views.phase
        self._aperture_views.show(*preview)

    def _send_map(self, *, fresh: bool = False) -> None:
        """Put the map at hand on the map figure (in true colour when that is shown).

        ``fresh``: a new result; the view moves to the window when a load or an element
        added or deleted asked for it (a changed window always moves it).
        """
        if self._map_data is None or getattr(self, "_map_plot", None) is None:
            return
        x, y, z = self._map_data
        colour = getattr(self, "true_colour", None)
        rgb = None
        if colour is not None:
            shown = colour.shown
            colour.built_with = shown
            rgb = colour.rgb() if shown else None
        reframe = fresh and self._reframe
        if fresh:
            self._reframe = False
        self._map_plot.show(x, y, z, rgb=rgb, reframe=reframe)

    def _cut_data(self, axis: str) -> dict | None:
        r = self.result
        if r is None:
            return None
        j = views.nearest(r.y, self.cut_y)
        i = views.nearest(r.x, self.cut_x)
        fn = self._closed.fn
        ref = None

        # The title gives the position asked for (the window centre by default), to a
        # pixel's digits; the data are the row or column nearest it.
        def step(a: np.ndarray) -> float | None:
            return float(a[1] - a[0]) if a.size > 1 else None

        if axis == "x":
            coords, values, marker = r.x, r.intensity[j, :], float(r.x[i])
            at, pixel = min(max(self.cut_y, float(r.y[0])), float(r.y[-1])), step(r.y)
            if fn is not None:
                ref = self._reference(fn, r.x, np.full_like(r.x, r.y[j]))
        else:
            coords, values, marker = r.y, r.intensity[:, i], float(r.y[j])
            at, pixel = min(max(self.cut_x, float(r.x[0])), float(r.x[-1])), step(r.x)
            if fn is not None:
                ref = self._reference(fn, np.full_like(r.y, r.x[i]), r.y)
        return {
            "coords": coords,
            "values": values,
            "axis": axis,
            "at": at,
            "step": pixel,
            "marker": marker,
            "reference": ref,
            "reference_label": self._closed.label.removeprefix("closed form: "),
        }

    @staticmethod
    def _reference(fn, x: np.ndarray, y: np.ndarray) -> np.ndarray | None:
        try:
            out = np.asarray(fn(x, y), dtype=np.float64)
        except (ValueError, FloatingPointError):
            return None
        return out if np.all(np.isfinite(out)) else None

    def _send_cuts(self) -> None:
        if self.result is None or not self._plots_built:
            return
        for axis in ("x", "y"):
            self._cut_plots[axis].update(self._cut_data(axis))
        self._place_crosshair()
        note = self._closed.label or "no closed form for this aperture"
        self.overlay_note.object = f'<span class="fb-note">{html.escape(note)}</span>'

    def _place_crosshair(self) -> None:
        if getattr(self, "_map_plot", None) is not None:
            self._map_plot.place_crosshair(self.cut_x * 1e3, self.cut_y * 1e3)  # mm

    def _set_busy_view(self, busy: bool) -> None:
        self.spinner.value = busy
        self._update_state()

    @param.depends("busy", watch=True)
    def _busy_changed(self) -> None:
        if self.busy:
            self._set_busy_view(True)

    def _update_state(self) -> None:
        """The machine-readable state of the page, for tests and scripts."""
        r = self.result
        attrs: dict[str, Any] = {
            "busy": int(self.busy),
            "computations": self.computations,
            "results": self.results_applied,
            "scale": self.scale,
            "cmap": self.cmap,
            "cut-x": repr(self.cut_x),
            "cut-y": repr(self.cut_y),
            "error": self.last_error,
            "setup-key": self._setup_key(),
            "elements": len(self.setup.aperture.elements),
        }
        if r is not None and self._map_data is not None:
            z = self._map_data[2]
            j = views.nearest(r.y, self.cut_y)
            i = views.nearest(r.x, self.cut_x)
            attrs.update(
                {
                    "key": r.key,
                    "method": r.plan.method,
                    "verdict": r.plan.verdict,
                    "peak": repr(float(z.max())),
                    "sum": repr(float(z.sum(dtype=np.float64))),
                    "shape": f"{z.shape[0]}x{z.shape[1]}",
                    "cut-row": j,
                    "cut-col": i,
                    "cut-row-sum": repr(float(r.intensity[j, :].sum())),
                    "cut-col-sum": repr(float(r.intensity[:, i].sum())),
                    "overlay": self._closed.label,
                    "elapsed-ms": f"{r.elapsed_s * 1e3:.1f}",
                    "numbers": getattr(self, "_numbers_key", ""),
                    "cached": int(bool(getattr(r, "cached", False))),
                }
            )
        attrs.update(self.state_extra)
        body = " ".join(f'data-{k}="{html.escape(str(v))}"' for k, v in attrs.items())
        self.state_pane.object = f'<div id="fb-state" class="fb-state-data" {body}></div>'
        if self._reading is not None:
            text = f"reading {self._reading}…"
        elif self.busy:
            text = "computing…"
        elif self.last_error:
            text = f"last computation failed: {self.last_error}"
        elif r is not None:
            text = (
                f"{r.plan.method} · {r.intensity.shape[1]}×{r.intensity.shape[0]} px · "
                f"{r.elapsed_s * 1e3:.0f} ms" + (" · cached" if getattr(r, "cached", False) else "")
            )
        else:
            text = ""
        cls = "fb-status-error" if self.last_error and not self.busy else ""
        self.status.object = f'<span class="{cls}">{html.escape(text)}</span>'

    def _setup_key(self) -> str:
        """The physics hash of the committed setup, made once per setup (setups are replaced)."""
        setup, key = self._key_memo
        if setup is not self.setup:
            key = snapshot.physics_hash(self.setup)
            self._key_memo = (self.setup, key)
        return key

    # ------------------------------------------- follow mode hooks (server.sharing)

    def _read_only(self) -> bool:
        """True (after saying so) while this session follows a shared one."""
        if self.following is None:
            return False
        self.notify("warning", sharing.READ_ONLY_TEXT)
        self._refresh_controls()
        return True

    def shared_state(self) -> tuple[Setup | None, Any, tuple | None, dict]:
        """What a follower shows: the result's setup, the result, its aperture preview, the view."""
        preview = self._preview if self._preview is not None else self._preview_shown
        return self._result_setup, self.result, preview, self.view_state()

    def show_shared(self, setup: Setup, result: Any, preview: tuple | None, view: dict) -> None:
        """Show another session's setup, view and result object as they are; compute nothing."""
        self.setup = clone(setup)
        with self._lock:
            if self._running:  # an own job still runs: after it, the shown setup is wanted
                self._wanted = self.setup
        self._apply_view(view)
        self._refresh_controls()
        self._run_setup_hooks()
        if result is not None and result is not self.result:
            key = _aperture_key(self.setup)
            if preview is not None and key != self._shown_aperture:
                self._preview, self._shown_aperture = preview, key
            self._result_setup = self.setup
            self._closed = views.closed_form(self.setup, result.plan.method, result.plan.variant)
            self.last_error = ""
            self.result = result
            self.results_applied += 1
            self._show_result()
        elif self._plots_built:
            self._send_cuts()
            self._update_state()

    # ------------------------------------------------------------------ layout

    def _card(self, title: str, *objects: Any, collapsed: bool = False, css: str = "") -> pn.Card:
        return pn.Card(
            *objects,
            title=title,
            collapsed=collapsed,
            sizing_mode="stretch_width",
            css_classes=["fb-panel", css] if css else ["fb-panel"],
        )

    def __panel__(self) -> pn.viewable.Viewable:
        if getattr(self, "_layout", None) is not None:
            return self._layout
        header = pn.Row(
            _html(
                '<div class="fb-brand"><span class="fb-name">fringebench</span>'
                '<span class="fb-tagline">scalar diffraction on the optical bench</span></div>',
                margin=(4, 10),
            ),
            _html(
                f'<div class="fb-safety" role="note">⚠ {html.escape(SAFETY_TEXT)}</div>',
                sizing_mode="stretch_width",
                css_classes=["fb-safety-pane"],
                margin=(4, 10),
            ),
            self.share_bar,
            sizing_mode="stretch_width",
            css_classes=["fb-header"],
        )
        snapshot_card = self._card(
            "Preset and snapshot",
            self.preset_picker,
            self.title_input,
            self.note_input,
            self.export_button,
            pn.pane.Markdown("Import a snapshot (.json):", margin=(0, 5)),
            self.import_input,
        )
        aperture_card = self._card(
            "Aperture",
            self.controls.background.widget,
            self.element_table,
            self.element_buttons,
            self.order_buttons,
            self.element_editor,
        )
        sidebar = pn.Column(
            snapshot_card,
            self._card("Source", self.controls.source_panel(), self.extra_source_controls),
            aperture_card,
            self._card("Screen", self.controls.screen_panel()),
            self._card("Camera", self.camera_controls, collapsed=True, css="fb-camera-card"),
            self._card("Numerics", self.controls.numerics_panel(), collapsed=True),
            width=340,
            css_classes=["fb-sidebar"],
        )
        toolbar = pn.Row(
            self.scale_switch,
            self.cmap_select,
            self.spinner,
            self.status,
            sizing_mode="stretch_width",
            css_classes=["fb-toolbar"],
        )
        main = pn.Column(
            toolbar,
            self.verdict_banner,
            self.problem_bar,
            self.preset_note,
            pn.Row(
                self.map_pane,
                self.camera_slot,
                pn.Column(self.numbers_pane, self.reading_hint, width=320),
                sizing_mode="stretch_width",
            ),
            self.overlay_note,
            # The cuts, the aperture and the validity report share the tab strip with
            # the regime tabs, so that those are one click away right under the map.
            self.explore_tabs,
            self.state_pane,
            sizing_mode="stretch_width",
            css_classes=["fb-main"],
        )
        self._layout = pn.Column(
            header,
            pn.Row(sidebar, main, sizing_mode="stretch_width"),
            sizing_mode="stretch_width",
            css_classes=["fb-root"],
        )
        return self._layout


def clone_element(el: Element) -> Element:
    """An independent copy of one element."""
    cls = type(el)
    values = {n: getattr(el, n) for n in el.param if n != "name"}
    if "vertices" in values:
        values["vertices"] = [list(v) for v in values["vertices"]]
    return cls(**values)
