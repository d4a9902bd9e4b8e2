"""The two cross-section plots under the map, drawn with Bokeh directly.

A cut changes with every result and every click on the map, so its plot is built
once (again only when the scale switches between linear and logarithmic, which
changes the axis type) and each update replaces the data of its sources in
place: one small message to the browser and no re-layout, where rebuilding a
HoloViews overlay costs tens of milliseconds of server time per update and
redraws the whole figure. Axes are in mm, irradiance in W/m².
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from bokeh.core.properties import value
from bokeh.models import ColumnDataSource, HoverTool, Range1d, Span
from bokeh.plotting import figure

from server import mapplot

__all__ = ["LOG_DECADES", "CutPlot", "cut_columns", "position_text"]

#: Dynamic range of the logarithmic scale (decades below the peak), as on the map.
LOG_DECADES = 6
_MM = 1e3
COMPUTED_COLOUR = "#f5a623"
REFERENCE_COLOUR = "#38d9c6"
MARKER_COLOUR = "#8892a6"


def position_text(value_mm: float, step_mm: float | None) -> str:
    """A position in mm rounded to the decimal place of one pixel (``step_mm``).

    ``0`` and not ``0.02083``: the cut runs along the row (or column) nearest the
    position asked for, within half a pixel, so no more digits than a pixel's are
    meaningful. Without a step, four significant digits.
    """
    if not math.isfinite(value_mm):
        return "—"
    if step_mm is None or not (step_mm > 0 and math.isfinite(step_mm)):
        text = f"{value_mm:.4g}"
    else:
        d = min(9, max(0, math.ceil(-math.log10(step_mm))))
        text = f"{value_mm:.{d}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "", "0") else text


def cut_columns(data: dict[str, Any] | None, *, scale: str) -> dict[str, Any]:
    """What a cut plot shows for one cut, in plot units.

    Parameters
    ----------
    data
        The dashboard's cut: ``coords`` (m), ``values`` (W/m²), ``axis`` ('x' or 'y'),
        ``at`` (m: the position asked for, shown in the title to the pixel's
        decimal place) and ``marker`` (m), optionally ``step`` (m: the pixel size
        across the cut), ``reference`` (W/m² on ``coords``, or None) and
        ``reference_label``; None for no result yet.
    scale
        ``'linear'`` or ``'log'``; on the log scale values are floored
        :data:`LOG_DECADES` decades below the peak so that zeros stay drawable.

    Returns
    -------
    dict
        ``coords`` (mm), ``values``, ``reference`` (or None), ``x_range``,
        ``y_range`` (None: automatic), ``marker`` (mm), ``title`` and
        ``reference_label``.
    """
    if data is None:
        return {
            "coords": np.zeros(0),
            "values": np.zeros(0),
            "reference": None,
            "x_range": (-1.0, 1.0),
            "y_range": None,
            "marker": 0.0,
            "title": "Cut",
            "reference_label": "",
        }
    coords = np.asarray(data["coords"], dtype=np.float64) * _MM
    values = np.asarray(data["values"], dtype=np.float64)
    ref = data.get("reference")
    ref = None if ref is None else np.asarray(ref, dtype=np.float64)
    peak = float(np.max(values)) if values.size else 0.0
    if ref is not None and ref.size:
        peak = max(peak, float(np.max(ref)))
    y_range = None
    if scale == "log":
        floor = peak * 10.0**-LOG_DECADES if peak > 0 else 1e-30
        values = np.maximum(values, floor)
        if ref is not None:
            ref = np.maximum(ref, floor)
        y_range = (floor, max(peak, floor * 10) * 1.5)
    other = "y" if data["axis"] == "x" else "x"
    at_mm = float(data["at"]) * _MM
    step = data.get("step")
    step_mm = None if step is None else float(step) * _MM
    lo, hi = (float(coords[0]), float(coords[-1])) if coords.size > 1 else (-1.0, 1.0)
    return {
        "coords": coords,
        "values": values,
        "reference": ref,
        "x_range": (lo, hi),
        "y_range": y_range,
        "marker": float(data["marker"]) * _MM,
        "title": f"Cut along {data['axis']} at {other} = {position_text(at_mm, step_mm)} mm",
        "reference_label": str(data.get("reference_label") or "closed form"),
    }


class CutPlot:
    """One cut (along ``axis``) as a Bokeh figure whose sources are updated in place.

    Parameters
    ----------
    axis
        ``'x'`` or ``'y'``: the coordinate along the cut (the column name of the
        sources, which the browser tests read).
    scale
        ``'linear'`` or ``'log'`` irradiance axis; fixed for the life of the plot.
    """

    def __init__(self, axis: str, *, scale: str):
        if axis not in ("x", "y"):
            raise ValueError(f"axis must be 'x' or 'y', got {axis!r}")
        self.axis = axis
        self.scale = scale
        self._coord = axis
        empty = {axis: np.zeros(0), "irradiance": np.zeros(0)}
        self.computed = ColumnDataSource(data=dict(empty))
        self.reference = ColumnDataSource(data=dict(empty))
        self._x_range = Range1d(-1.0, 1.0)
        self._y_range = Range1d(1e-30, 1.0) if scale == "log" else None
        extra = {"y_range": self._y_range} if self._y_range is not None else {}
        fig = figure(
            height=260,
            sizing_mode="stretch_width",
            x_range=self._x_range,
            y_axis_type="log" if scale == "log" else "linear",
            x_axis_label=f"{axis} (mm)",
            y_axis_label="irradiance (W/m²)",
            tools="pan,wheel_zoom,box_zoom,reset,save",
            toolbar_location="right",
            title="Cut",
            **extra,
        )
        line = fig.line(
            axis, "irradiance", source=self.computed, color=COMPUTED_COLOUR, line_width=2
        )
        self._ref_line = fig.line(
            axis,
            "irradiance",
            source=self.reference,
            color=REFERENCE_COLOUR,
            line_width=1.5,
            line_dash="dashed",
            legend_label="closed form",
            visible=False,
        )
        fig.legend.location = "top_right"
        fig.legend.visible = False
        fig.legend.background_fill_alpha = 0.6
        # Positions to a tenth of a sample, irradiance to four digits, no "e+".
        self._length_fmt, value_fmt = mapplot.hover_formatters(3)
        fig.add_tools(
            HoverTool(
                renderers=[line],
                tooltips=[
                    (axis, f"@{axis}{{custom}} mm"),
                    ("irradiance", "@irradiance{custom} W/m²"),
                ],
                formatters={f"@{axis}": self._length_fmt, "@irradiance": value_fmt},
                mode="vline",
            )
        )
        self._marker = Span(
            location=0.0, dimension="height", line_color=MARKER_COLOUR, line_width=1
        )
        fig.add_layout(self._marker)
        self.figure = fig

    def update(self, data: dict[str, Any] | None) -> None:
        """Show one cut (the dashboard's cut dictionary, or None for none)."""
        cols = cut_columns(data, scale=self.scale)
        self.computed.data = {self._coord: cols["coords"], "irradiance": cols["values"]}
        ref = cols["reference"]
        if ref is None:
            self.reference.data = {self._coord: np.zeros(0), "irradiance": np.zeros(0)}
        else:
            self.reference.data = {self._coord: cols["coords"], "irradiance": ref}
            self.figure.legend.items[0].label = value(cols["reference_label"])
        self._ref_line.visible = ref is not None
        self.figure.legend.visible = ref is not None
        self._x_range.start, self._x_range.end = cols["x_range"]
        if self._y_range is not None and cols["y_range"] is not None:
            self._y_range.start, self._y_range.end = cols["y_range"]
        self._marker.location = cols["marker"]
        coords = cols["coords"]
        if coords.size > 1:
            decimals = mapplot.axis_decimals(float(coords[1] - coords[0]))
            if self._length_fmt.args.get("decimals") != decimals:
                self._length_fmt.args = {"decimals": decimals}
        self.figure.title.text = cols["title"]
