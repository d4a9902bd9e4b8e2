"""The along-the-beam tab: irradiance on one cut through the axis at every distance.

One x–z image (distance on a logarithmic horizontal axis, from a fraction of the
aperture size to well beyond the Fraunhofer distance, as
:func:`compute.alongz.plan_along_z` chooses), the regime boundaries by Fresnel
number drawn on it and labelled with their N_F, and the current screen distance
marked. A click on the image moves the screen there through
:meth:`~server.dashboard.Dashboard.set_value`, so a refused distance gets the
dashboard's own message and changes nothing.

The image is computed only while its tab is shown (or when asked for), on the
server-wide compute queue (:data:`server.sharing.COMPUTE_QUEUE`), one job per
session at a time with the newest request winning; a failure leaves the last
good image up and says why in plain words. Images are cached, server-wide, on
the physics of the setup without the screen distance: moving the screen only
moves the marker.
"""

from __future__ import annotations

import functools
import hashlib
import html
import json
import logging
import math
import threading
from collections import OrderedDict
from concurrent.futures import Future
from pathlib import Path
from typing import Any

import holoviews as hv
import numpy as np
import panel as pn

from compute import alongz, apertures, planning, snapshot
from compute.alongz import AlongZ
from compute.model import Setup
from server import sharing

__all__ = [
    "POINTS_X",
    "TAB_TITLE",
    "AlongZView",
    "alongz_key",
    "beam_frame",
    "boundary_overlay",
    "distance_ticks",
    "image_view",
    "marker_position",
    "on_axis_view",
    "unresolved_overlay",
    "unresolved_runs",
]

log = logging.getLogger("fringebench.alongz_view")

TAB_TITLE = "Along the beam"
#: Most positions across the cut (the screen's pixels, thinned out to this many).
POINTS_X = 320
#: Distances in one image.
COUNT = alongz.DEFAULT_COUNT
#: Decades below the peak that the logarithmic colour scale shows.
DECADES = 6
#: Images kept for the whole server, newest last.
CACHE_SIZE = 8
_MM = 1e3
_ASSETS = Path(__file__).resolve().parent / "assets"
_CSS = (
    (_ASSETS / "regime.css").read_text(encoding="utf-8")
    if (_ASSETS / "regime.css").exists()
    else ""
)

_LOGZ = hv.Dimension("log10_z", label="distance from the aperture")
_XCUT = hv.Dimension("x", label="x", unit="mm")
_IRR = hv.Dimension("alongz_irradiance", label="irradiance", unit="W/m²")
_AXIS_IRR = hv.Dimension("on_axis", label="irradiance on the axis", unit="W/m²")


# ------------------------------------------------------------------ cache key, cache


def alongz_key(setup: Setup) -> str:
    """The physics hash of ``setup`` with the screen distance left out.

    The along-z image does not depend on where the screen stands, so moving it
    must not recompute anything.
    """
    physics = json.loads(snapshot.canonical_json(setup))
    physics["screen"].pop("distance", None)
    text = json.dumps(physics, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


class _Cache:
    """A small server-wide store of finished images, and the jobs still running.

    A second session asking for an image that is being computed gets the same
    future instead of a second job.
    """

    def __init__(self, size: int):
        self.size = size
        self._lock = threading.Lock()
        self._done: OrderedDict[str, AlongZ] = OrderedDict()
        self._running: dict[str, Future] = {}

    def get(self, key: str) -> AlongZ | None:
        with self._lock:
            hit = self._done.get(key)
            if hit is not None:
                self._done.move_to_end(key)
            return hit

    def put(self, key: str, value: AlongZ) -> None:
        with self._lock:
            self._done[key] = value
            self._done.move_to_end(key)
            while len(self._done) > self.size:
                self._done.popitem(last=False)

    def running(self, key: str) -> Future | None:
        with self._lock:
            return self._running.get(key)

    def start(self, key: str, submit) -> Future:
        """The running job for ``key``, or a new one from ``submit()``."""
        with self._lock:
            fut = self._running.get(key)
            if fut is not None and not fut.done():
                return fut
        fut = submit()
        with self._lock:
            self._running[key] = fut

        def forget(f: Future, key: str = key) -> None:
            with self._lock:
                if self._running.get(key) is f:
                    del self._running[key]

        fut.add_done_callback(forget)
        return fut

    def clear(self) -> None:
        with self._lock:
            self._done.clear()


CACHE = _Cache(CACHE_SIZE)


#: The cut reaches this many half-widths of the aperture either side of its centre.
APERTURE_MARGIN = 1.5


def _cut_positions(setup: Setup) -> np.ndarray:
    """Positions across the cut: the screen window and the aperture, one sample on the axis.

    The cut spans the screen window and the aperture (with a margin), so that the
    near field, as wide as the aperture, is on the image even when the window is
    narrower (a lens focus). The positions are equally spaced, at most about
    :data:`POINTS_X`, and one of them lies on the axis x = 0 when the span holds it
    (else on the window's centre), so that the on-axis curve is on the axis. None of
    this depends on the screen distance: moving the screen recomputes nothing.
    """
    x = planning.screen_axes(setup)[0]
    lo, hi = float(x[0]), float(x[-1])
    box = apertures.aperture_bounds(setup.aperture)
    if box is not None and math.isfinite(box[0]) and math.isfinite(box[1]):
        centre, half = 0.5 * (box[0] + box[1]), 0.5 * (box[1] - box[0])
        lo = min(lo, centre - APERTURE_MARGIN * half)
        hi = max(hi, centre + APERTURE_MARGIN * half)
    if x.size <= POINTS_X and (lo, hi) == (float(x[0]), float(x[-1])):
        return x
    axis = 0.0 if lo <= 0.0 <= hi else float(setup.screen.x)
    step = (hi - lo) / (POINTS_X - 1)
    below = math.ceil((axis - lo) / step - 1e-9)
    above = math.ceil((hi - axis) / step - 1e-9)
    return axis + step * np.arange(-below, above + 1, dtype=np.float64)


def _memory(setup: Setup) -> int:
    """Working memory of the along-z job, bytes (its own plan, not the screen's)."""
    return alongz.plan_along_z(setup, count=COUNT, x=_cut_positions(setup)).memory_bytes


def _compute(setup: Setup, key: str) -> AlongZ:
    """The queue's job: the image, stored in the cache."""
    result = alongz.along_z(setup, count=COUNT, x=_cut_positions(setup))
    CACHE.put(key, result)
    return result


# ------------------------------------------------------------------------ plotting


def _length_label(z: float) -> str:
    """A distance for an axis tick: µm, mm, m or km, as people write it."""
    for unit, factor in (("km", 1e3), ("m", 1.0), ("mm", 1e-3), ("µm", 1e-6)):
        if z >= factor * (1 - 1e-9):
            return f"{z / factor:g} {unit}"
    return f"{z:.3g} m"


def distance_ticks(z_min: float, z_max: float) -> list[tuple[float, str]]:
    """Ticks at whole decades of distance between ``z_min`` and ``z_max`` (log10 positions)."""
    lo, hi = math.ceil(math.log10(z_min) - 1e-9), math.floor(math.log10(z_max) + 1e-9)
    ticks = [(float(k), _length_label(10.0**k)) for k in range(lo, hi + 1)]
    if len(ticks) < 2:  # a narrow range: its ends
        ticks = [(math.log10(z), _length_label(float(f"{z:.3g}"))) for z in (z_min, z_max)]
    return ticks


def _edges(centres: np.ndarray) -> tuple[float, float]:
    step = (centres[-1] - centres[0]) / max(1, centres.size - 1)
    return float(centres[0] - step / 2), float(centres[-1] + step / 2)


def image_view(az: AlongZ | None) -> hv.Image:
    """The x–z image: log10 of the distance across, x (mm) up, irradiance on a log scale."""
    if az is None:
        return hv.Image(
            np.zeros((2, 2)), bounds=(-1, -1, 1, 1), kdims=[_LOGZ, _XCUT], vdims=[_IRR]
        ).opts(
            responsive=True,
            height=360,
            title="Along the beam (not computed yet)",
        )
    logz = np.log10(az.z)
    data = np.asarray(az.intensity, dtype=np.float64).T  # rows: x, columns: distance
    peak = float(data.max()) if data.size else 0.0
    floor = peak * 10.0**-DECADES if peak > 0 else 1e-30
    data = np.maximum(data, floor)
    left, right = _edges(logz)
    bottom, top = _edges(az.x * _MM)
    frame = beam_frame(az)
    img = hv.Image(
        np.flipud(data), bounds=(left, bottom, right, top), kdims=[_LOGZ, _XCUT], vdims=[_IRR]
    )
    return img.opts(
        cmap="inferno",
        cnorm="log",
        clim=(floor, max(peak, floor * 10)),
        colorbar=True,
        xticks=distance_ticks(float(az.z[0]), float(az.z[-1])),
        tools=["hover", "tap"],
        hover_tooltips=[
            ("distance", "10^$x{0.000} m"),
            ("x", "$y{0.000} mm"),
            ("irradiance", "@image{0.000e+0} W/m²"),
        ],
        responsive=True,
        height=360,
        framewise=True,
        toolbar="above",
        ylim=(frame[0] * _MM, frame[1] * _MM),
        title=f"Irradiance along the beam on the cut y = {az.y0 * _MM:.4g} mm",
    )


#: Light weaker than this share of the brightest point at the same distance does not
#: count for the frame of the image.
FRAME_FLOOR = 1e-3


def beam_frame(az: AlongZ) -> tuple[float, float]:
    """The x range (m) that frames the beam: the aperture and the light at every distance.

    The light is where the irradiance reaches :data:`FRAME_FLOOR` of the brightest
    point at the same distance, anywhere in the drawn range; the aperture is its lit
    region with :data:`APERTURE_MARGIN`. A margin of 5 % is added; the frame never
    leaves the computed cut.
    """
    x = az.x
    lo_cut, hi_cut = float(x[0]), float(x[-1])
    data = np.asarray(az.intensity, dtype=np.float64)
    peaks = data.max(axis=1, keepdims=True) if data.size else np.zeros((0, 1))
    with np.errstate(invalid="ignore", divide="ignore"):
        lit = ((data >= FRAME_FLOOR * peaks) & (peaks > 0)).any(axis=0)
    lo, hi = (float(x[lit].min()), float(x[lit].max())) if lit.any() else (lo_cut, hi_cut)
    box = az.plan.lit_box
    if box is not None:
        centre, half = 0.5 * (box[0] + box[1]), 0.5 * (box[1] - box[0])
        lo = min(lo, centre - APERTURE_MARGIN * half)
        hi = max(hi, centre + APERTURE_MARGIN * half)
    pad = 0.05 * (hi - lo) if hi > lo else 0.05 * (hi_cut - lo_cut)
    return max(lo_cut, lo - pad), min(hi_cut, hi + pad)


def unresolved_runs(az: AlongZ) -> list[tuple[int, int]]:
    """``[(start, stop), ...]``: runs of distances whose row the grid cannot resolve."""
    bad = ~np.asarray(az.resolved, bool)
    runs: list[tuple[int, int]] = []
    k = 0
    while k < bad.size:
        if bad[k]:
            j = k
            while j + 1 < bad.size and bad[j + 1]:
                j += 1
            runs.append((k, j + 1))
            k = j + 1
        else:
            k += 1
    return runs


_UNRESOLVED_STYLE = {"color": "#8892a6", "alpha": 0.55}
UNRESOLVED_TEXT = "not resolved by the grid"


def unresolved_overlay(az: AlongZ | None, *, label: bool = True) -> hv.Overlay:
    """Grey bands over the distances the grid cannot resolve, labelled once.

    Those rows keep only the spatial frequencies a grid of
    :data:`compute.alongz.DEFAULT_MAX_GRID` samples holds; they are drawn under
    the band so that they are not read as right.
    """
    layers: list[Any] = []
    if az is not None:
        logz = np.log10(az.z)
        edges = (
            np.concatenate(
                [
                    [logz[0] - (logz[1] - logz[0]) / 2],
                    (logz[1:] + logz[:-1]) / 2,
                    [logz[-1] + (logz[-1] - logz[-2]) / 2],
                ]
            )
            if logz.size > 1
            else np.array([logz[0] - 0.5, logz[0] + 0.5])
        )
        runs = unresolved_runs(az)
        for start, stop in runs:
            layers.append(
                hv.VSpan(float(edges[start]), float(edges[stop])).opts(**_UNRESOLVED_STYLE)
            )
        if label and runs:
            start, stop = max(runs, key=lambda r: r[1] - r[0])
            frame = beam_frame(az)
            layers.append(
                hv.Text(
                    float(0.5 * (edges[start] + edges[stop])),
                    float(frame[0] * _MM + 0.92 * (frame[1] - frame[0]) * _MM),
                    UNRESOLVED_TEXT,
                    halign="center",
                ).opts(text_color="#ffffff", text_font_size="9pt")
            )
    return hv.Overlay(layers or [hv.VLine(0).opts(alpha=0)])


def boundary_overlay(az: AlongZ | None) -> hv.Overlay:
    """The regime boundaries inside the image's range, each labelled with its N_F."""
    if az is None:
        return hv.Overlay([hv.VLine(0).opts(alpha=0)])
    lo, hi = math.log10(az.z[0]), math.log10(az.z[-1])
    top = float(az.x[-1] * _MM)
    span = float((az.x[-1] - az.x[0]) * _MM)
    style = {"color": "#38d9c6", "line_width": 1.5, "line_dash": "dotted"}
    text = {"text_color": "#e8ecf3", "text_font_size": "9pt", "text_baseline": "top"}
    layers: list[Any] = []
    cuts = [lo]
    for b in az.boundaries:
        at = math.log10(b.z)
        if lo < at < hi:
            cuts.append(at)
            layers.append(hv.VLine(at).opts(**style))
            layers.append(
                hv.Text(at, top - 0.02 * span, f" N_F = {b.fresnel_number:g}", halign="left").opts(
                    **text
                )
            )
    cuts.append(hi)
    # The regions between the boundaries that are inside the range, by name.
    names = ["near field", "Fresnel zone", "Fraunhofer zone"]
    limits = [math.inf] + [b.fresnel_number for b in az.boundaries] + [0.0]
    mid_y = float(az.x[0] * _MM) + 0.08 * span
    for name, upper, lower in zip(names, limits[:-1], limits[1:], strict=True):
        # N_F falls with distance: this region spans the distances where lower < N_F < upper.
        inside = (az.fresnel_number > lower) & (az.fresnel_number <= upper)
        if inside.sum() >= 0.12 * az.z.size:
            centre = float(np.mean(np.log10(az.z[inside])))
            layers.append(
                hv.Text(centre, mid_y, name, halign="center").opts(
                    text_color="#f5a623", text_font_size="9pt", text_baseline="bottom"
                )
            )
    return hv.Overlay(layers or [hv.VLine(lo).opts(alpha=0)])


def marker_position(distance: float | None, z_range: tuple[float, float] | None) -> tuple:
    """Where the screen marker goes: ``(log10 position, label)``.

    Inside the drawn range the marker sits at the screen distance with no label;
    beyond it, it is clamped to the nearer edge and labelled with the distance and
    an arrow that points to where the screen is.
    """
    if distance is None or not (distance > 0):
        return None, ""
    at = math.log10(distance)
    if z_range is None:
        return at, ""
    lo, hi = (math.log10(z) for z in z_range)
    if at > hi:
        return hi, f"screen at {_length_label(float(f'{distance:.3g}'))} ▸"
    if at < lo:
        return lo, f"◂ screen at {_length_label(float(f'{distance:.3g}'))}"
    return at, ""


def _marker(distance: float | None, z_range=None, top: float | None = None) -> hv.Overlay:
    at, label = marker_position(distance, z_range)
    if at is None:
        line = hv.VLine(0).opts(alpha=0)
    else:
        line = hv.VLine(at).opts(color="#f5a623", line_width=2, line_dash="dashed")
    if top is None:
        return hv.Overlay([line])
    text = hv.Text(
        0.0 if at is None else at,
        top,
        label,
        halign="right" if label.endswith("▸") else "left",
    ).opts(text_color="#f5a623", text_font_size="9pt", text_baseline="top")
    return hv.Overlay([line, text])


def on_axis_view(az: AlongZ | None) -> hv.Curve:
    """Irradiance on the axis (the cut position nearest x = 0) against distance."""
    if az is None:
        return hv.Curve([], kdims=[_LOGZ], vdims=[_AXIS_IRR]).opts(responsive=True, height=200)
    i = int(np.argmin(np.abs(az.x)))
    values = np.asarray(az.intensity[:, i], dtype=np.float64)
    peak = float(values.max()) if values.size else 0.0
    floor = peak * 10.0**-DECADES if peak > 0 else 1e-30
    shown = np.maximum(values, floor)
    # The rows the grid cannot resolve are drawn apart, grey and dashed, under a band.
    resolved = np.asarray(az.resolved, bool)
    good = np.where(resolved, shown, np.nan)
    doubtful = np.where(~resolved, shown, np.nan)
    logz = np.log10(az.z)
    curve = hv.Curve((logz, good), kdims=[_LOGZ], vdims=[_AXIS_IRR])
    grey = hv.Curve((logz, doubtful), kdims=[_LOGZ], vdims=[_AXIS_IRR]).opts(
        color="#8892a6", line_dash="dashed", logy=True
    )
    curve = curve.opts(
        logy=True,
        color="#38d9c6",
        xticks=distance_ticks(float(az.z[0]), float(az.z[-1])),
        responsive=True,
        height=200,
        framewise=True,
        toolbar="above",
        tools=["hover"],
        title=f"On the axis (x = {az.x[i] * _MM:.3g} mm)"
        + (f"; grey dashed: {UNRESOLVED_TEXT}" if not resolved.all() else ""),
    )
    return curve * grey * unresolved_overlay(az, label=False)


# ---------------------------------------------------------------------------- panel


class AlongZView:
    """The along-the-beam tab of one dashboard.

    Parameters
    ----------
    dash
        The session's :class:`~server.dashboard.Dashboard`; the tab registers
        itself in its ``explore_tabs``, ``setup_hooks`` and ``result_hooks``.
    threaded
        Compute on the server's queue (True) or in the calling thread (False);
        the dashboard's own setting by default.
    auto
        Compute when a new screen result is shown while the tab is shown; by
        default only in a served session (a dashboard built in a script or a
        test computes when asked, or when its tab is picked).
    """

    def __init__(self, dash: Any, *, threaded: bool | None = None, auto: bool | None = None):
        self.dash = dash
        self.threaded = dash._threaded if threaded is None else bool(threaded)
        doc = getattr(dash, "_doc", None)
        served = doc is not None and getattr(doc, "session_context", None) is not None
        self.auto = served if auto is None else bool(auto)
        self.data: AlongZ | None = None  # the last good image
        self.data_key: str | None = None
        self.status = "idle"  # idle, stale, computing, ready, failed
        self.error = ""
        self.computations = 0
        self._lock = threading.Lock()
        self._running = False
        self._wanted: tuple[str, Setup] | None = None

        self.compute_button = pn.widgets.Button(
            label="Compute now", css_classes=["fb-alongz-compute"], color="primary", width=130
        )
        self.compute_button.on_click(lambda _e: self.request(force=True))
        self.note = pn.pane.HTML(
            "", stylesheets=[_CSS], css_classes=["fb-alongz-note"], sizing_mode="stretch_width"
        )
        # The marker moves through its own stream; a new image replaces the plots.
        self._marker_pipe = hv.streams.Pipe(data=dash.setup.screen.distance)
        self._tap: hv.streams.Tap | None = None
        self.image_pane = pn.pane.HoloViews(
            None, sizing_mode="stretch_width", css_classes=["fb-alongz-image"]
        )
        self.curve_pane = pn.pane.HoloViews(
            None, sizing_mode="stretch_width", css_classes=["fb-alongz-curve"]
        )
        self._draw(None)
        self.panel = pn.Column(
            pn.Row(self.compute_button, self.note, sizing_mode="stretch_width"),
            self.image_pane,
            self.curve_pane,
            sizing_mode="stretch_width",
            css_classes=["fb-alongz"],
            stylesheets=[_CSS],
        )
        dash.explore_tabs.append((TAB_TITLE, self.panel))
        dash.explore_tabs.param.watch(self._tab_changed, "active")
        dash.setup_hooks.append(self._setup_changed)
        dash.result_hooks.append(self._result_shown)
        self._publish()

    # ------------------------------------------------------------------ requests

    def shown(self) -> bool:
        """Whether this tab is the one shown in the dashboard's tab strip."""
        tabs = self.dash.explore_tabs
        for k, obj in enumerate(tabs.objects):
            if obj is self.panel:
                return tabs.active == k
        return False

    def request(self, *, force: bool = False) -> None:
        """Show the image for the current setup: from the cache, or computed if shown or forced."""
        setup = self.dash.setup
        key = alongz_key(setup)
        if force or self.shown():
            self._move_marker(setup.screen.distance)
        if key == self.data_key and self.status != "computing":
            self.status, self.error = "ready", ""
            self._publish()
            return
        hit = CACHE.get(key)
        if hit is not None:
            with self._lock:
                self._wanted = None if not self._running else (key, setup)
            self._show(key, hit)
            return
        if not (force or self.shown()):
            self.status = "stale"
            self._publish()
            return
        with self._lock:
            self._wanted = (key, snapshot.from_dict(snapshot.to_dict(setup)))
            if self._running:
                return  # the running job starts the newest request when it ends
            self._running = True
            key, job_setup = self._wanted
        self._launch(key, job_setup)

    def _launch(self, key: str, setup: Setup) -> None:
        self.computations += 1
        self.status = "computing"
        self._publish()
        if not self.threaded:
            fut: Future = Future()
            try:
                fut.set_result(_compute(setup, key))
            except Exception as exc:
                fut.set_exception(exc)
            self._finish(key, fut)
            return
        fut = CACHE.start(
            key,
            lambda: sharing.COMPUTE_QUEUE.submit(
                setup,
                functools.partial(_compute, setup, key),
                priority=self.dash.priority + sharing.PRIORITY_BACKGROUND,
                estimate=functools.partial(_memory, setup),
            ),
        )
        fut.add_done_callback(lambda f: self.dash._schedule(lambda: self._finish(key, f)))

    def _finish(self, key: str, fut: Future) -> None:
        with self._lock:
            wanted = self._wanted
            newer = wanted is not None and wanted[0] != key
            if newer:
                next_key, next_setup = wanted
            else:
                self._running, self._wanted = False, None
        if newer:
            hit = CACHE.get(next_key)
            if hit is None:
                self._launch(next_key, next_setup)
                return
            with self._lock:
                self._running, self._wanted = False, None
            self._show(next_key, hit)
            return
        exc = fut.exception()
        if exc is not None:
            from server.dashboard import failure_message  # the dashboard's plain wording

            if not isinstance(exc, (ValueError, MemoryError)):
                log.error("the view along the beam failed", exc_info=exc)
            self.status = "failed"
            self.error = failure_message(exc)
            self.dash.notify(
                "error", f"The view along the beam failed, the last image stays: {self.error}"
            )
            self._publish()
            return
        self._show(key, fut.result())

    def _move_marker(self, distance: float) -> None:
        if self._marker_pipe.data != distance:
            self._marker_pipe.send(distance)

    def _show(self, key: str, data: AlongZ) -> None:
        self.data, self.data_key = data, key
        self.status, self.error = "ready", ""
        self._draw(data)
        self._marker_pipe.send(self.dash.setup.screen.distance)
        self._publish()

    def _draw(self, data: AlongZ | None) -> None:
        """Put a new image (and its on-axis curve) on screen, with the screen marker."""
        img = image_view(data)
        if self._tap is not None:
            self._tap.clear()
        self._tap = hv.streams.Tap(source=img, x=None, y=None)
        self._tap.add_subscriber(self._tapped)
        z_range = None if data is None else (float(data.z[0]), float(data.z[-1]))
        top = None if data is None else float(beam_frame(data)[1] * _MM)
        marker = hv.DynamicMap(
            lambda data: _marker(data, z_range, top), streams=[self._marker_pipe]
        )
        curve_marker = hv.DynamicMap(
            lambda data: _marker(data, z_range), streams=[self._marker_pipe]
        )
        self.image_pane.object = img * unresolved_overlay(data) * boundary_overlay(data) * marker
        # No empty plots before the first image: the note says what happens instead.
        self.image_pane.visible = self.curve_pane.visible = data is not None
        self.curve_pane.object = on_axis_view(data) * curve_marker

    # --------------------------------------------------------------------- hooks

    def _tab_changed(self, _event: Any) -> None:
        if self.shown():
            self.request()

    def _setup_changed(self, setup: Setup) -> None:
        # The marker follows at once while the tab is shown (redrawing it costs tens of
        # milliseconds of the shared event loop; a hidden tab catches up when shown);
        # the image waits for the screen result, so that the screen's own computation
        # goes first.
        if self.shown():
            self._move_marker(setup.screen.distance)
        if self.status == "ready" and alongz_key(setup) != self.data_key:
            self.status = "stale"
        self._publish()

    def _result_shown(self, _setup: Setup, _result: Any) -> None:
        if self.auto and self.shown():
            self.request()

    def _tapped(self, x: float | None = None, y: float | None = None) -> None:
        if x is None or not math.isfinite(x):
            return
        z = float(f"{10.0**x:.4g}")  # four digits: a distance a person can type again
        self.dash.set_value("screen.distance", z)

    # --------------------------------------------------------------------- state

    def _note_html(self) -> str:
        parts = []
        az = self.data
        if self.status == "computing":
            parts.append("computing the view along the beam…")
        elif self.status == "stale":
            parts.append("the setup has changed; this tab recomputes when it is shown")
        elif self.status == "idle":
            parts.append("not computed yet")
        if self.error:
            parts.append(f'<span class="fb-regime-error">failed: {html.escape(self.error)}</span>')
        if az is not None:
            fz = az.fraunhofer_distance
            parts.append(
                f"{az.z.size} distances from {_length_label(float(az.z[0]))} to "
                f"{_length_label(float(az.z[-1]))}; Fraunhofer distance 2D²/λ = "
                f"{_length_label(fz)}; {az.elapsed_s:.2g} s"
            )
            unresolved = int((~az.resolved).sum())
            if unresolved:
                parts.append(
                    f'<span class="fb-alongz-unresolved">grey bands: {unresolved} of '
                    f"{az.z.size} distances are {UNRESOLVED_TEXT} (they keep only the "
                    f"frequencies a {alongz.DEFAULT_MAX_GRID}-sample grid holds; read "
                    "those on the screen map instead)</span>"
                )
            _at, label = marker_position(
                self.dash.setup.screen.distance, (float(az.z[0]), float(az.z[-1]))
            )
            if label:
                parts.append(
                    f"the screen ({_length_label(self.dash.setup.screen.distance)}) lies "
                    "beyond the drawn range; its marker sits at the edge"
                )
        parts.append("click the image to move the screen there")
        return '<div class="fb-regime-note">' + " · ".join(parts) + "</div>"

    def _publish(self) -> None:
        az = self.data
        extra: dict[str, str] = {
            "alongz-status": self.status,
            "alongz-computations": str(self.computations),
            "alongz-error": self.error,
            "alongz-marker": repr(float(self.dash.setup.screen.distance)),
            "alongz-key": self.data_key or "",
        }
        if az is not None:
            extra.update(
                {
                    "alongz-z-min": repr(float(az.z[0])),
                    "alongz-z-max": repr(float(az.z[-1])),
                    "alongz-shape": f"{az.x.size}x{az.z.size}",
                    "alongz-peak": repr(float(np.max(az.intensity))),
                    "alongz-boundaries": ";".join(
                        f"{b.fresnel_number!r}:{b.z!r}" for b in az.boundaries
                    ),
                    "alongz-fraunhofer": repr(float(az.fraunhofer_distance)),
                    "alongz-unresolved": str(int((~az.resolved).sum())),
                    "alongz-frame": ",".join(repr(v) for v in beam_frame(az)),
                }
            )
        self.dash.state_extra.update(extra)
        self.note.object = self._note_html()
        self.dash._update_state()
