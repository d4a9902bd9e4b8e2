"""The sweep tab: one or two settings varied over ranges, a figure of merit per point.

The user picks the settings (every numeric snapshot path of the current setup,
labelled in bench units), a range for each (start, stop, count, linear or
logarithmic) and a metric. The points are planned by
:func:`compute.sweep.plan_sweep` (so a bad range gets its own message and
changes nothing) and computed one by one by :func:`compute.sweep.compute_point`,
each on the server-wide compute queue at the session's priority, from a
background thread that reports :class:`compute.sweep.SweepProgress` and stops
when asked: Cancel returns within a poll interval, keeps the points done so far
on screen, and a point that a queue lane is still computing is dropped when it
ends. The rows are those of ``fringebench sweep`` for the same plan, and the
last sweep downloads as the same CSV.
"""

from __future__ import annotations

import functools
import html
import io
import logging
import math
import threading
import time
from collections.abc import Callable
from concurrent.futures import Future, TimeoutError
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import holoviews as hv
import numpy as np
import panel as pn

from compute import snapshot
from compute.errors import SetupError
from compute.model import Setup
from compute.snapshot import PHYSICS_SECTIONS
from compute.sweep import (
    MAX_POINTS,
    METRIC_COLUMNS,
    SweepError,
    SweepPlan,
    SweepProgress,
    Vary,
    compute_point,
    plan_sweep,
)
from server import controls, sharing
from server.controls import to_display, to_si
from server.sweepcli import csv_text

__all__ = [
    "METRICS",
    "POLL_S",
    "TAB_TITLE",
    "Metric",
    "SweepPanel",
    "Sweepable",
    "sweep_view",
    "sweepable",
]

log = logging.getLogger("fringebench.sweep_panel")

TAB_TITLE = "Sweep"
#: Seconds between two looks at the cancel flag while a point computes.
POLL_S = 0.05
#: Seconds between two progress updates of the page (the last one always goes).
REDRAW_S = 0.3
_NONE = ""
_ASSETS = Path(__file__).resolve().parent / "assets"
_CSS = (
    (_ASSETS / "regime.css").read_text(encoding="utf-8")
    if (_ASSETS / "regime.css").exists()
    else ""
)


# --------------------------------------------------------------------- what to vary


@dataclass(frozen=True)
class Sweepable:
    """A numeric setting that a sweep can vary: its path, a label and the display unit."""

    path: str
    label: str
    unit: str
    value: float | int
    integer: bool

    @property
    def title(self) -> str:
        unit = f" ({self.unit})" if self.unit else ""
        return f"{self.label}{unit} · {self.path}"


# Element settings common to every shape (the element editor shows the same units).
_ELEMENT_COMMON = {
    "x": ("centre x", "µm"),
    "y": ("centre y", "µm"),
    "angle": ("rotation", "°"),
    "transmission": ("amplitude transmission", ""),
    "phase": ("phase", "rad"),
}


def _fields(fields) -> dict[str, tuple[str, str]]:
    return {f.name: (f.label.lower(), f.unit) for f in fields}


def _number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def sweepable(setup: Setup) -> list[Sweepable]:
    """Every single number of the physics sections of ``setup``, in snapshot order."""
    doc = snapshot.to_dict(setup)
    known = {
        "source": _fields(controls.SOURCE_FIELDS),
        "screen": _fields(controls.SCREEN_FIELDS),
        "numerics": {"grid": ("grid size", "")},
    }
    out: list[Sweepable] = []
    for section in PHYSICS_SECTIONS:
        node = doc.get(section)
        if not isinstance(node, dict):
            continue
        for name, value in node.items():
            if section == "aperture" and name == "elements" and isinstance(value, list):
                for i, el in enumerate(value):
                    shape = el.get("shape", "")
                    names = dict(_ELEMENT_COMMON)
                    names.update(_fields(controls.ELEMENT_FIELDS.get(shape, [])))
                    for key, v in el.items():
                        if _number(v):
                            label, unit = names.get(key, (key.replace("_", " "), ""))
                            out.append(
                                Sweepable(
                                    f"aperture.elements[{i}].{key}",
                                    f"element {i + 1} ({shape}) {label}",
                                    unit,
                                    v,
                                    isinstance(v, int),
                                )
                            )
            elif _number(value):
                label, unit = known.get(section, {}).get(name, (name.replace("_", " "), ""))
                if unit and unit not in controls.UNITS:
                    unit = ""
                title = label if label.startswith(section) else f"{section} {label}"
                out.append(
                    Sweepable(f"{section}.{name}", title, unit, value, isinstance(value, int))
                )
    return out


# ------------------------------------------------------------------------- metrics


@dataclass(frozen=True)
class Metric:
    """A column of the sweep's rows as plotted: its label and display unit."""

    column: str
    label: str
    unit: str = ""
    factor: float = 1.0  # SI value = display value × factor


METRICS: dict[str, Metric] = {
    m.column: m
    for m in (
        Metric("peak_irradiance", "peak irradiance", "W/m²"),
        Metric("central_lobe_x", "central lobe width x", "mm", 1e-3),
        Metric("central_lobe_y", "central lobe width y", "mm", 1e-3),
        Metric("d4sigma_x", "D4σ width x", "mm", 1e-3),
        Metric("d4sigma_y", "D4σ width y", "mm", 1e-3),
        Metric("window_power", "power on the window", "W"),
        Metric("visibility", "fringe visibility"),
        Metric("fresnel_number", "Fresnel number"),
        Metric("method", "method chosen"),
    )
}
assert set(METRICS) <= set(METRIC_COLUMNS)

#: Colours of the methods (our own palette on the dark bench).
METHOD_COLOURS = {
    "fraunhofer": "#f5a623",
    "fresnel": "#38d9c6",
    "angular_spectrum": "#b48cff",
    "rayleigh_sommerfeld": "#ff7a8a",
    "none": "#8892a6",
    "error": "#ff3b3b",
}
_PX = hv.Dimension("sweep_x")
_PY = hv.Dimension("sweep_y")
_PM = hv.Dimension("sweep_method", label="method")
_PV = hv.Dimension("sweep_validity", label="validity")
#: Disabled buttons look disabled: faded, and no pointer (Bokeh's own look barely changes).
DISABLED_CSS = (
    ":host .bk-btn:disabled, :host .bk-btn[disabled], :host .bk-btn.bk-disabled "
    "{ opacity: 0.35; cursor: not-allowed; filter: grayscale(0.8); }"
)


def _column(rows: list[dict | None], column: str, factor: float) -> np.ndarray:
    out = np.full(len(rows), np.nan)
    for k, r in enumerate(rows):
        v = None if r is None else r.get(column)
        if _number(v):
            out[k] = float(v) / factor
    return out


def _method_of(r: dict | None) -> str:
    if r is None:
        return "none"
    if r.get("error"):
        return "error"
    return str(r.get("method") or "none")


def _edges(values: np.ndarray, log: bool) -> np.ndarray:
    v = np.log10(values) if log else values.astype(np.float64)
    if v.size == 1:
        e = np.array([v[0] - 0.5, v[0] + 0.5])
    else:
        mid = (v[1:] + v[:-1]) / 2
        e = np.concatenate([[2 * v[0] - mid[0]], mid, [2 * v[-1] - mid[-1]]])
    return 10.0**e if log else e


#: How points are marked whose validity report is not all "ok" (our own marks).
VALIDITY_MARKS = {
    "marginal": {"marker": "circle", "line_color": "#ffd56b", "label": "validity marginal"},
    "invalid": {"marker": "x", "line_color": "#ff3b3b", "label": "validity: does not hold"},
}


def _validity_of(r: dict | None) -> str:
    return "" if r is None else str(r.get("validity") or "")


def _validity_marks(xs, ys, verdicts: list[str], kdims) -> list[Any]:
    """Rings (marginal) and crosses (invalid) over the points whose report says so."""
    layers = []
    for verdict, style in VALIDITY_MARKS.items():
        keep = [k for k, v in enumerate(verdicts) if v == verdict]
        if not keep:
            continue
        data = {
            kdims[0].name: np.asarray(xs, dtype=np.float64)[keep],
            kdims[1].name: np.asarray(ys, dtype=np.float64)[keep],
            "sweep_validity": [verdict] * len(keep),
        }
        layers.append(
            hv.Scatter(data, kdims=kdims[:1], vdims=[kdims[1], _PV], label=style["label"]).opts(
                marker=style["marker"],
                size=15,
                fill_alpha=0.0,
                line_color=style["line_color"],
                line_width=2,
                color=style["line_color"],
            )
        )
    return layers


def sweep_view(
    axes: list[tuple[Sweepable, list[float] | list[int], bool]],
    rows: list[dict | None],
    metric: str,
    *,
    logy: bool = False,
) -> hv.Element | hv.Overlay:
    """The plot of a sweep: metric against the setting, or a map over two settings.

    ``axes`` holds, per varied setting, what it is, its SI values and whether the
    range is logarithmic; ``rows[k]`` is the row of grid point k (None while not
    computed). One setting: a line through the points, the points coloured by the
    method, a ring round each point whose validity report is marginal and a cross
    on each where an approximation does not hold, and a logarithmic metric axis when
    ``logy`` (not for ``method``); two: a map of the metric (of the method's number
    for ``method``), with the same crosses and rings on its cells.
    """
    m = METRICS[metric]
    ylabel = f"{m.label} ({m.unit})" if m.unit else m.label
    first, values, log_x = axes[0]
    xunit = first.unit
    xs = np.asarray(values, dtype=np.float64) / controls.UNITS[xunit]  # unrounded: the rows' values
    xlabel = f"{first.label} ({xunit})" if xunit else first.label
    if len(axes) == 1:
        methods = [_method_of(r) for r in rows]
        if metric == "method":
            ys: Any = [mm if r is not None else "" for mm, r in zip(methods, rows, strict=True)]
            keep = [k for k, r in enumerate(rows) if r is not None]
            data = {
                "sweep_x": xs[keep],
                "sweep_y": [ys[k] for k in keep],
                "sweep_method": [methods[k] for k in keep],
            }
            line = hv.Curve([], kdims=[_PX], vdims=[_PY])
        else:
            yv = _column(rows, metric, m.factor)
            keep = [k for k, r in enumerate(rows) if r is not None]
            data = {
                "sweep_x": xs[keep],
                "sweep_y": yv[keep],
                "sweep_method": [methods[k] for k in keep],
            }
            line = hv.Curve((xs[keep], yv[keep]), kdims=[_PX], vdims=[_PY]).opts(
                color="#8892a6", line_width=1
            )
        data["sweep_validity"] = [_validity_of(rows[k]) for k in keep]
        points = hv.Scatter(data, kdims=[_PX], vdims=[_PY, _PM, _PV]).opts(
            color="sweep_method",
            cmap=METHOD_COLOURS,
            size=7,
            show_legend=True,
            legend_position="top_right",
            tools=["hover"],
        )
        logy = logy and metric != "method"
        layers = [line, points]
        if metric != "method":
            layers += _validity_marks(
                data["sweep_x"], data["sweep_y"], data["sweep_validity"], [_PX, _PY]
            )
        overlay = hv.Overlay(layers)
        return overlay.opts(
            hv.opts.Curve(logx=log_x, logy=logy, xlabel=xlabel, ylabel=ylabel),
            hv.opts.Scatter(logx=log_x, logy=logy, xlabel=xlabel, ylabel=ylabel),
        ).opts(
            responsive=True,
            height=360,
            legend_position="top_right",
            title=f"{m.label} against {first.label}",
        )
    second, values2, log_y = axes[1]
    yunit = second.unit
    ys2 = np.asarray(values2, dtype=np.float64) / controls.UNITS[yunit]
    n1, n2 = len(xs), len(ys2)
    if metric == "method":
        names = list(METHOD_COLOURS)
        z = np.array([np.nan if r is None else float(names.index(_method_of(r))) for r in rows])
        clabel = "method (" + ", ".join(f"{k} {n}" for k, n in enumerate(names)) + ")"
    else:
        z = _column(rows, metric, m.factor)
        clabel = ylabel
    grid = z.reshape(n1, n2).T  # rows: the second setting, columns: the first
    verdicts = [_validity_of(r) for r in rows]
    cx = np.repeat(xs, n2)
    cy = np.tile(ys2, n1)
    marks = _validity_marks(cx, cy, verdicts, [_PX, hv.Dimension("sweep_x2")])
    mesh = hv.QuadMesh(
        (_edges(xs, log_x), _edges(ys2, log_y), grid),
        kdims=[_PX, hv.Dimension("sweep_x2")],
        vdims=[hv.Dimension("sweep_z", label=clabel)],
    )
    mesh = mesh.opts(
        cmap="viridis",
        colorbar=True,
        logx=log_x,
        logy=log_y,
        xlabel=xlabel,
        ylabel=f"{second.label} ({yunit})" if yunit else second.label,
        clabel=clabel,
        tools=["hover"],
        responsive=True,
        height=360,
        title=f"{m.label} over {first.label} and {second.label}",
    )
    return (
        hv.Overlay([mesh, *marks])
        .opts(hv.opts.Scatter(logx=log_x, logy=log_y))
        .opts(responsive=True, height=360)
    )


def _error_row(message: str) -> dict[str, Any]:
    """A row of a point that could not be computed (as :func:`compute_point` gives)."""
    row: dict[str, Any] = dict.fromkeys(METRIC_COLUMNS)
    row["error"] = message
    return row


# ---------------------------------------------------------------------------- panel


class _AxisControls:
    """The widgets of one varied setting: which, start, stop, count, spacing."""

    def __init__(self, n: int, optional: bool):
        self.optional = optional
        label = f"Setting {n}"
        self.path = pn.widgets.Select(
            label=label, options={}, css_classes=[f"fb-sweep-path{n}"], sizing_mode="stretch_width"
        )
        self.start = pn.widgets.FloatInput(
            label="Start", value=0.0, css_classes=[f"fb-sweep-start{n}"], width=110
        )
        self.stop = pn.widgets.FloatInput(
            label="Stop", value=1.0, css_classes=[f"fb-sweep-stop{n}"], width=110
        )
        self.count = pn.widgets.IntInput(
            label="Points",
            value=11,
            start=1,
            end=MAX_POINTS,
            css_classes=[f"fb-sweep-count{n}"],
            width=90,
        )
        self.spacing = pn.widgets.RadioButtonGroup(
            options=["linear", "log"],
            value="linear",
            css_classes=[f"fb-sweep-spacing{n}"],
            width=130,
        )
        self.unit = pn.pane.HTML("", stylesheets=[_CSS], css_classes=["fb-sweep-unit"], width=60)
        self.panel = pn.Column(
            self.path,
            pn.Row(self.start, self.stop, self.unit, self.count, self.spacing),
            sizing_mode="stretch_width",
        )


class SweepPanel:
    """The sweep tab of one dashboard.

    Parameters
    ----------
    dash
        The session's :class:`~server.dashboard.Dashboard`; the tab registers
        itself in its ``explore_tabs`` and ``setup_hooks``.
    threaded
        Run sweeps in a background thread on the server's queue (True) or in the
        calling thread (False); the dashboard's own setting by default.
    """

    def __init__(self, dash: Any, *, threaded: bool | None = None):
        self.dash = dash
        self.threaded = dash._threaded if threaded is None else bool(threaded)
        self.state = "idle"  # idle, running, done, cancelled, failed
        self.message = ""
        self.plan: SweepPlan | None = None
        self.axes: list[tuple[Sweepable, list, bool]] = []
        self.rows: list[dict | None] = []
        self.done = 0
        self.total = 0
        self.runs = 0
        self.cancel_ms: float | None = None
        self._choices: dict[str, Sweepable] = {}
        self._lock = threading.Lock()
        self._cancel = threading.Event()
        self._cancel_at: float | None = None
        self._thread: threading.Thread | None = None
        self._last_draw = 0.0

        self.axis1 = _AxisControls(1, optional=False)
        self.axis2 = _AxisControls(2, optional=True)
        self.metric = pn.widgets.Select(
            label="Metric",
            options={m.label: c for c, m in METRICS.items()},
            value="peak_irradiance",
            css_classes=["fb-sweep-metric"],
            width=220,
        )
        self.run_button = pn.widgets.Button(
            label="Run",
            color="primary",
            css_classes=["fb-sweep-run"],
            width=90,
            stylesheets=[DISABLED_CSS],
        )
        self.cancel_button = pn.widgets.Button(
            label="Cancel",
            color="warning",
            css_classes=["fb-sweep-cancel"],
            width=90,
            disabled=True,
            stylesheets=[DISABLED_CSS],
        )
        self.logy = pn.widgets.Checkbox(
            name="log y", value=False, css_classes=["fb-sweep-logy"], width=70
        )
        self.progress = pn.indicators.Progress(
            value=0,
            max=1,
            css_classes=["fb-sweep-progress"],
            sizing_mode="stretch_width",
            height=18,
        )
        self.note = pn.pane.HTML(
            "", stylesheets=[_CSS], css_classes=["fb-sweep-note"], sizing_mode="stretch_width"
        )
        self.download = pn.widgets.FileDownload(
            callback=self._csv,
            filename="fringebench-sweep.csv",
            label="Download CSV",
            css_classes=["fb-sweep-csv"],
            width=150,
            disabled=True,
            stylesheets=[DISABLED_CSS],
        )
        # No empty plot before the first sweep: a line that says what to do instead.
        self.plot_pane = pn.pane.HoloViews(
            self._plot(None),
            sizing_mode="stretch_width",
            css_classes=["fb-sweep-plot"],
            visible=False,
        )
        self.run_button.on_click(lambda _e: self.run())
        self.cancel_button.on_click(lambda _e: self.cancel())
        self.axis1.path.param.watch(lambda e: self._path_picked(self.axis1, e.new), "value")
        self.axis2.path.param.watch(lambda e: self._path_picked(self.axis2, e.new), "value")
        self.metric.param.watch(lambda _e: self._redraw(), "value")
        self.logy.param.watch(lambda _e: self._redraw(), "value")
        self.panel = pn.Column(
            # One setting under the other: side by side they do not fit at 1280 px.
            self.axis1.panel,
            self.axis2.panel,
            pn.FlexBox(
                self.metric,
                self.logy,
                self.run_button,
                self.cancel_button,
                self.download,
                flex_wrap="wrap",
                align_items="flex-end",
                sizing_mode="stretch_width",
            ),
            self.progress,
            self.note,
            self.plot_pane,
            sizing_mode="stretch_width",
            css_classes=["fb-sweep"],
            stylesheets=[_CSS],
        )
        self._refresh_choices(dash.setup, initial=True)
        dash.explore_tabs.append((TAB_TITLE, self.panel))
        dash.setup_hooks.append(self._setup_changed)
        self._publish()

    # ------------------------------------------------------------------- choices

    def _refresh_choices(self, setup: Setup, *, initial: bool = False) -> None:
        items = sweepable(setup)
        self._choices = {s.path: s for s in items}
        options = {s.title: s.path for s in items}
        for ax in (self.axis1, self.axis2):
            keep = ax.path.value
            opts = ({"(none)": _NONE} if ax.optional else {}) | options
            if ax.path.options != opts:  # unchanged: nothing to send over the shared loop
                ax.path.options = opts
            if keep in opts.values():
                ax.path.value = keep
                self._show_unit(ax)
            elif ax.optional:
                ax.path.value = _NONE
            elif items:
                first = "screen.distance" if "screen.distance" in self._choices else items[0].path
                ax.path.value = first
                self._path_picked(ax, first)

    def _show_unit(self, ax: _AxisControls) -> None:
        s = self._choices.get(ax.path.value)
        ax.unit.object = (
            f'<span class="fb-sweep-unit-text">{html.escape(s.unit if s else "")}</span>'
        )

    def _path_picked(self, ax: _AxisControls, path: str) -> None:
        """Suggest a range around the setting's value: half to twice it (or ±1 unit at 0)."""
        s = self._choices.get(path)
        self._show_unit(ax)
        if s is None:
            return
        v = to_display(s.value, s.unit) if s.unit else float(s.value)
        if v > 0:
            lo, hi = v / 2, v * 2
            if s.integer:
                lo, hi = max(1.0, math.floor(lo)), math.ceil(hi)
            ax.start.value, ax.stop.value = float(f"{lo:.6g}"), float(f"{hi:.6g}")
        else:
            ax.start.value, ax.stop.value = v - 1.0, v + 1.0
        ax.spacing.value = "linear"

    def _setup_changed(self, setup: Setup) -> None:
        self._refresh_choices(setup)

    # ------------------------------------------------------------------ running

    def _varies(self) -> tuple[list[Vary], list[tuple[Sweepable, bool]]]:
        """The ranges as the widgets say, in SI units (SweepError when one is bad)."""
        out, picked = [], []
        for ax in (self.axis1, self.axis2):
            path = ax.path.value
            if not path:
                continue
            s = self._choices.get(path)
            if s is None:
                raise SweepError(
                    str(path), "this setting is not in the current setup; pick another"
                )
            start, stop = ax.start.value, ax.stop.value
            if start is None or stop is None:
                raise SweepError(path, "give both a start and a stop value")
            count = ax.count.value
            if count is None:
                raise SweepError(path, "give the number of points")
            si = (lambda v, u=s.unit: to_si(v, u)) if s.unit else float
            log_ = ax.spacing.value == "log"
            out.append(Vary(path, si(start), si(stop), int(count), log_))
            picked.append((s, log_))
        return out, picked

    def run(self) -> bool:
        """Start a sweep of the current setup over the ranges given; False when refused."""
        if self.dash.following is not None:
            self._refuse(
                "this session follows a shared one and cannot start sweeps; make an own "
                "copy to run one"
            )
            return False
        if self.state == "running":
            self._refuse("a sweep is already running in this session; cancel it first")
            return False
        try:
            varies, picked = self._varies()
            plan = plan_sweep(self.dash.setup, varies)
        except SweepError as exc:
            self._refuse(f"{exc.what}: {exc.message}")
            return False
        axes = [(s, vals, log_) for (s, log_), (_p, vals) in zip(picked, plan.axes, strict=True)]
        with self._lock:
            self.plan, self.axes = plan, axes
            self.rows = [None] * plan.total
            self.done, self.total = 0, plan.total
            self.state, self.message, self.cancel_ms = "running", "", None
            self.runs += 1
        self._cancel.clear()
        self._cancel_at = None
        self.run_button.disabled = True
        self.cancel_button.disabled = False
        self.download.disabled = True
        self._redraw()
        self._publish()
        if self.threaded:
            self._thread = threading.Thread(
                target=self._drive, args=(plan,), name="fringebench-sweep", daemon=True
            )
            self._thread.start()
        else:
            self._drive(plan)
        return True

    def cancel(self) -> None:
        """Ask the running sweep to stop; the points done so far stay."""
        if self.state != "running" or self._cancel.is_set():
            return
        self._cancel_at = time.monotonic()
        self._cancel.set()
        self.cancel_button.disabled = True

    def wait(self, timeout: float = 120.0) -> bool:
        """Block until no sweep runs (for tests and scripts)."""
        t = self._thread
        if t is not None:
            t.join(timeout)
            return not t.is_alive()
        return True

    def _point(self, doc: dict, cancelled: Callable[[], bool]) -> dict | None:
        """One point's metrics, computed on the queue; None when cancelled meanwhile."""
        if not self.threaded:
            return compute_point(doc)
        setup = snapshot.from_dict(doc)
        fut: Future = sharing.COMPUTE_QUEUE.submit(
            setup,
            functools.partial(compute_point, doc),
            priority=self.dash.priority + sharing.PRIORITY_BACKGROUND,
        )
        while True:
            if cancelled():
                fut.cancel()  # a queued point is dropped; a running one ends unread
                return None
            try:
                return fut.result(timeout=POLL_S)
            except TimeoutError:
                continue
            except SetupError as exc:  # refused by the queue: as compute_point says it
                return _error_row(f"{exc.path}: {exc.message}")
            except Exception as exc:
                log.error("a sweep point failed", exc_info=exc)
                return _error_row(f"internal error ({type(exc).__name__}: {exc})")

    def _drive(self, plan: SweepPlan) -> None:
        """The background loop: every point in grid order, until done or cancelled."""
        cancelled = self._cancel.is_set
        state = "done"
        for k, doc in enumerate(plan.docs):
            if cancelled():
                state = "cancelled"
                break
            metrics_row = self._point(doc, cancelled)
            if metrics_row is None:
                state = "cancelled"
                break
            row = dict(plan.point_values(k))
            row.update(metrics_row)
            with self._lock:
                self.rows[k] = row
                self.done += 1
                report = SweepProgress(self.done, plan.total, k, row)
            self._progress(report)
        stopped = time.monotonic()
        with self._lock:
            if state == "cancelled" and self._cancel_at is not None:
                self.cancel_ms = (stopped - self._cancel_at) * 1e3
            self.state = state
        self.dash._schedule(self._finished)

    def _progress(self, report: SweepProgress) -> None:
        now = time.monotonic()
        if report.done < report.total and now - self._last_draw < REDRAW_S:
            return
        self._last_draw = now
        self.dash._schedule(self._show_progress)

    def _show_progress(self) -> None:
        self._redraw()
        self._publish()

    def _finished(self) -> None:
        self.run_button.disabled = False
        self.cancel_button.disabled = True
        self.download.disabled = self.done == 0
        if self.state == "cancelled":
            self.message = f"cancelled after {self.done} of {self.total} points" + (
                f" (stopped {self.cancel_ms:.0f} ms after Cancel)"
                if self.cancel_ms is not None
                else ""
            )
        else:
            failed = sum(1 for r in self.rows if r is not None and r.get("error"))
            self.message = f"{self.done} points done" + (
                f"; {failed} could not be computed (see the CSV's error column)" if failed else ""
            )
        self._redraw()
        self._publish()

    def _refuse(self, text: str) -> None:
        """A sweep that cannot start: say why, keep the last sweep as it is."""
        self.message = text
        self.dash.notify("error", f"Sweep not started: {text}")
        self._publish(error=True)

    # ------------------------------------------------------------------ showing

    def _plot(self, data: Any) -> Any:
        if data is None:
            return hv.Curve([], kdims=[_PX], vdims=[_PY]).opts(
                responsive=True, height=360, title="No sweep yet"
            )
        axes, rows, metric = data
        return sweep_view(axes, rows, metric, logy=self.logy.value)

    def _redraw(self) -> None:
        with self._lock:
            if not self.axes:
                return
            data = (list(self.axes), list(self.rows), self.metric.value)
        self.plot_pane.object = self._plot(data)  # a new plot: its kind may change
        self.plot_pane.visible = True

    def _csv(self) -> io.StringIO:
        with self._lock:
            plan, rows = self.plan, [r for r in self.rows if r is not None]
        if plan is None:
            return io.StringIO("")
        return io.StringIO(csv_text(rows, plan.columns))

    def _publish(self, *, error: bool = False) -> None:
        with self._lock:
            extra = {
                "sweep-state": self.state,
                "sweep-done": str(self.done),
                "sweep-total": str(self.total),
                "sweep-runs": str(self.runs),
                "sweep-message": self.message,
                "sweep-cancel-ms": "" if self.cancel_ms is None else f"{self.cancel_ms:.1f}",
                "sweep-paths": ",".join(s.path for s, _v, _l in self.axes),
            }
            self.progress.max = max(1, self.total)
            self.progress.value = self.done
        cls = "fb-regime-error" if error else "fb-regime-note"
        text = self.message
        if not text and self.state == "idle":
            text = "Pick one or two settings and their ranges, then Run: the plot appears here."
        self.note.object = f'<div class="{cls}">{html.escape(text)}</div>'
        self.dash.state_extra.update(extra)
        self.dash._update_state()
