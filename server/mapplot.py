"""The screen irradiance map and the aperture previews, drawn with Bokeh directly.

Each plot is built once per session and then updated in place: a new result
replaces the arrays of its data sources (sent to the browser in binary) and sets
its ranges, and nothing is re-laid out unless the shape of the window changes.
Every plot has ranges of its own (never shared or linked with another plot), so
the map always opens on the screen window and each aperture preview on the
aperture, and the reset tool returns each plot to that frame.

The plotting frame (the area inside the axes) is sized from the window's aspect,
so that one screen pixel spans the same length in x and in y: circles are drawn
as circles. Axes are in mm, irradiance in W/m².
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import colorcet
import numpy as np
from bokeh import events
from bokeh.models import (
    ColorBar,
    ColumnDataSource,
    CustomJSHover,
    HoverTool,
    LinearColorMapper,
    LogColorMapper,
    Range1d,
    Span,
)
from bokeh.palettes import Cividis256, Greys256, Inferno256, Magma256, Viridis256
from bokeh.plotting import figure

__all__ = [
    "AMPLITUDE_NAME",
    "MAP_FRAME",
    "MAP_NAME",
    "PHASE_NAME",
    "PREVIEW_FRAME",
    "ApertureViews",
    "MapPlot",
    "axis_decimals",
    "frame_size",
    "hover_formatters",
    "image_extent",
]

_MM = 1e3
#: The largest plotting frame of the map (width, height) in screen pixels; the frame
#: is fitted inside it at the window's aspect.
MAP_FRAME = (440, 400)
#: Names of the figures in the Bokeh document (what the browser tests look up).
MAP_NAME = "fb-map-figure"
AMPLITUDE_NAME = "fb-aperture-figure"
PHASE_NAME = "fb-phase-figure"
#: Smallest side of a frame, so that a very elongated window still shows a strip.
MIN_SIDE = 60
#: The frame of each aperture preview (width, height).
PREVIEW_FRAME = (250, 250)
PALETTES: dict[str, Any] = {
    "inferno": Inferno256,
    "viridis": Viridis256,
    "magma": Magma256,
    "cividis": Cividis256,
    "fire": colorcet.fire,
    "gray": Greys256,
    "grey": Greys256,
}
TOOLS = "pan,wheel_zoom,box_zoom,reset,save"
CROSSHAIR_COLOUR = "#38d9c6"

# Hover formatters run in the browser. A length is shown in mm with the decimals the
# pixel size calls for (``decimals``, set by the server per result); an irradiance
# with four significant digits, and a power of ten written out (no "e+").
_LENGTH_JS = """
const d = Math.max(0, Math.min(9, decimals));
const v = Math.abs(value) < 0.5 * Math.pow(10, -d) ? 0 : value;
return v.toFixed(d);
"""
_VALUE_JS = """
const v = value;
if (v === null || v === undefined || Number.isNaN(v)) return "—";
if (v === 0) return "0";
const e = Math.floor(Math.log10(Math.abs(v)));
if (e >= -3 && e <= 5) {
  return v.toFixed(Math.max(0, 3 - e));
}
const sup = {"-": "⁻", "0": "⁰", "1": "¹", "2": "²", "3": "³", "4": "⁴", "5": "⁵",
             "6": "⁶", "7": "⁷", "8": "⁸", "9": "⁹"};
const m = v / Math.pow(10, e);
const exp = String(e).split("").map(c => sup[c]).join("");
return m.toFixed(3) + "×10" + exp;
"""


def axis_decimals(step_mm: float) -> int:
    """Decimals that show a position to about a tenth of ``step_mm`` (a pixel, in mm)."""
    if not (step_mm > 0 and math.isfinite(step_mm)):
        return 3
    return int(min(9, max(0, math.ceil(-math.log10(step_mm)) + 1)))


def image_extent(axis: np.ndarray) -> tuple[float, float]:
    """Edges (first, last) of the pixels whose centres are ``axis`` (equal steps)."""
    a = np.asarray(axis, dtype=np.float64)
    if a.size == 0:
        return -1.0, 1.0
    if a.size == 1:
        half = abs(float(a[0])) * 1e-3 or 1e-6
        return float(a[0]) - half, float(a[0]) + half
    step = (float(a[-1]) - float(a[0])) / (a.size - 1)
    return float(a[0]) - 0.5 * step, float(a[-1]) + 0.5 * step


def frame_size(width: float, height: float, box: tuple[int, int] = MAP_FRAME) -> tuple[int, int]:
    """The frame (pixels) inside ``box`` that shows ``width`` × ``height`` at 1:1 aspect.

    A window more elongated than ``box`` allows keeps its long side and gets at least
    :data:`MIN_SIDE` pixels on the short one (then, and only then, the aspect is not 1:1).
    """
    bw, bh = box
    if not (width > 0 and height > 0):
        return bw, bh
    aspect = width / height
    if aspect >= bw / bh:
        return bw, max(MIN_SIDE, round(bw / aspect))
    return max(MIN_SIDE, round(bh * aspect)), bh


def hover_formatters(decimals: int) -> tuple[CustomJSHover, CustomJSHover]:
    """Hover formatters (length in mm to ``decimals`` places, irradiance to 4 digits).

    The length formatter's decimals change with ``formatter.args = {"decimals": d}``.
    """
    return (
        CustomJSHover(code=_LENGTH_JS, args={"decimals": decimals}),
        CustomJSHover(code=_VALUE_JS),
    )


def _image_figure(title: str, frame: tuple[int, int], name: str, **kw: Any):
    fig = figure(
        title=title,
        name=name,
        x_range=Range1d(-1.0, 1.0, reset_start=-1.0, reset_end=1.0),
        y_range=Range1d(-1.0, 1.0, reset_start=-1.0, reset_end=1.0),
        frame_width=frame[0],
        frame_height=frame[1],
        x_axis_label="x (mm)",
        y_axis_label="y (mm)",
        tools=TOOLS,
        toolbar_location="above",
        sizing_mode="fixed",
        width=None,  # the frame sets the size (a width or height would pad the pane)
        height=None,
        **kw,
    )
    fig.toolbar.logo = None
    fig.grid.visible = False
    for tool in fig.toolbar.tools:
        if type(tool).__name__ == "BoxZoomTool":
            tool.match_aspect = True
    return fig


def _set_frame(fig, x0: float, x1: float, y0: float, y1: float, *, reframe: bool) -> None:
    """Set the reset frame of ``fig``'s ranges to the extent; move the view there if asked."""
    xr, yr = fig.x_range, fig.y_range
    xr.reset_start, xr.reset_end, yr.reset_start, yr.reset_end = x0, x1, y0, y1
    if reframe:
        xr.start, xr.end, yr.start, yr.end = x0, x1, y0, y1


class MapPlot:
    """The screen irradiance map as one Bokeh figure whose sources are updated in place.

    Parameters
    ----------
    scale
        ``'linear'`` or ``'log'`` colour scale (switchable with :meth:`set_scale`).
    cmap
        A palette name of :data:`PALETTES`.
    on_tap
        Called with (x, y) in mm when the map is clicked, under the document lock.
    """

    def __init__(
        self,
        *,
        scale: str = "linear",
        cmap: str = "inferno",
        on_tap: Callable[[float, float], None] | None = None,
    ):
        self.scale = scale
        self._extent: tuple[float, float, float, float] | None = None
        self._decimals = 3
        self._last: tuple | None = None
        blank = {"image": [], "x": [], "y": [], "dw": [], "dh": []}
        self.source = ColumnDataSource(data=dict(blank))
        self.rgba_source = ColumnDataSource(data=dict(blank))
        palette = PALETTES.get(cmap, Inferno256)
        self.linear_mapper = LinearColorMapper(palette=palette, low=0.0, high=1.0)
        self.log_mapper = LogColorMapper(palette=palette, low=1e-6, high=1.0)
        mapper = self.log_mapper if scale == "log" else self.linear_mapper
        fig = _image_figure("Screen irradiance (W/m²)", MAP_FRAME, MAP_NAME)
        self.image = fig.image(
            image="image", x="x", y="y", dw="dw", dh="dh", source=self.source, color_mapper=mapper
        )
        self.rgba = fig.image_rgba(
            image="image", x="x", y="y", dw="dw", dh="dh", source=self.rgba_source, visible=False
        )
        self.colour_bar = ColorBar(color_mapper=mapper, width=12, padding=4, label_standoff=6)
        fig.add_layout(self.colour_bar, "right")
        length, value = hover_formatters(self._decimals)
        self._length_fmt = length
        self.hover = HoverTool(
            renderers=[self.image],
            tooltips=[
                ("x", "$x{custom} mm"),
                ("y", "$y{custom} mm"),
                ("irradiance", "@image{custom} W/m²"),
            ],
            formatters={"$x": length, "$y": length, "@image": value},
        )
        self.colour_hover = HoverTool(
            renderers=[self.rgba],
            tooltips=[("x", "$x{custom} mm"), ("y", "$y{custom} mm")],
            formatters={"$x": length, "$y": length},
        )
        fig.add_tools(self.hover, self.colour_hover)
        style = {"line_color": CROSSHAIR_COLOUR, "line_width": 1, "line_dash": "dashed"}
        self.vertical = Span(dimension="height", location=0.0, **style)
        self.horizontal = Span(dimension="width", location=0.0, **style)
        fig.add_layout(self.vertical)
        fig.add_layout(self.horizontal)
        if on_tap is not None:
            # Bokeh reports a second click within 300 ms as a double tap, wherever it
            # lands: both move the cuts, so a quick second click is never lost.
            for kind in (events.Tap, events.DoubleTap):
                fig.on_event(kind, lambda e: on_tap(float(e.x), float(e.y)))
        self.figure = fig

    # ----------------------------------------------------------------- updates

    def show(
        self,
        x: np.ndarray,
        y: np.ndarray,
        intensity: np.ndarray,
        *,
        rgb: np.ndarray | None = None,
        reframe: bool = False,
    ) -> None:
        """Show a map (axes in m, W/m²); ``rgb`` (ny, nx, 3 uint8) shows it in true colour.

        The view moves to the window when ``reframe`` is true or the window changed;
        otherwise a zoom the user chose stays.
        """
        x0, x1 = (v * _MM for v in image_extent(x))
        y0, y1 = (v * _MM for v in image_extent(y))
        # The same arrays on the same scale (a camera read-out edit, a redraw) are not
        # sent again.
        shown = (intensity, rgb, self.scale, x0, x1, y0, y1)
        last = self._last
        same = (
            last is not None
            and shown[0] is last[0]
            and shown[1] is last[1]
            and shown[2:] == last[2:]
        )
        self._last = shown
        data = np.asarray(intensity, dtype=np.float32) if not same else None
        ny, nx = np.shape(intensity)
        geometry = {"x": [x0], "y": [y0], "dw": [x1 - x0], "dh": [y1 - y0]}
        if data is not None:
            peak = float(np.max(data)) if data.size else 0.0
            if self.scale == "log":
                floor = peak * 10.0**-6 if peak > 0 else 1e-30
                data = np.maximum(data, np.float32(floor))
                self.log_mapper.update(low=floor, high=max(peak, floor * 10))
            else:
                self.linear_mapper.update(low=0.0, high=peak if peak > 0 else 1.0)
            self.source.data = {"image": [data], **geometry}
            if rgb is not None:
                rgba = np.empty((*rgb.shape[:2], 4), dtype=np.uint8)
                rgba[..., :3] = rgb
                rgba[..., 3] = 255
                self.rgba_source.data = {"image": [rgba.view(np.uint32)[..., 0]], **geometry}
            elif len(self.rgba_source.data["image"]):
                self.rgba_source.data = {"image": [], "x": [], "y": [], "dw": [], "dh": []}
        colour = rgb is not None
        if self.rgba.visible != colour:
            self.rgba.visible = colour
            self.image.visible = not colour
            self.colour_bar.visible = not colour
        self.figure.title.text = (
            "Screen in true colour (sRGB, as the eye would see it)"
            if colour
            else "Screen irradiance (W/m²)"
        )
        step = min((x1 - x0) / max(nx, 1), (y1 - y0) / max(ny, 1))
        decimals = axis_decimals(step)
        if decimals != self._decimals:
            self._decimals = decimals
            self._length_fmt.args = {"decimals": decimals}
        extent = (x0, x1, y0, y1)
        moved = extent != self._extent
        if moved:
            fw, fh = frame_size(x1 - x0, y1 - y0)
            if (self.figure.frame_width, self.figure.frame_height) != (fw, fh):
                self.figure.frame_width, self.figure.frame_height = fw, fh
        _set_frame(self.figure, *extent, reframe=reframe or moved)
        self._extent = extent

    def set_scale(self, scale: str) -> None:
        """Switch the colour scale (the caller shows the map again for its data)."""
        if scale == self.scale:
            return
        self.scale = scale
        mapper = self.log_mapper if scale == "log" else self.linear_mapper
        self.image.glyph.color_mapper = mapper
        self.colour_bar.color_mapper = mapper

    def set_cmap(self, cmap: str) -> None:
        """Change the palette of both colour scales (no data is sent)."""
        palette = PALETTES.get(cmap, Inferno256)
        self.linear_mapper.palette = palette
        self.log_mapper.palette = palette

    def place_crosshair(self, x_mm: float, y_mm: float) -> None:
        """Move the crosshair through (x, y) in mm."""
        self.vertical.location = x_mm
        self.horizontal.location = y_mm

    @property
    def extent(self) -> tuple[float, float, float, float] | None:
        """The window shown (x0, x1, y0, y1) in mm, or None before the first map."""
        return self._extent


class ApertureViews:
    """Amplitude and phase of the aperture transmittance: two figures, each framing it.

    Each figure has its own ranges (not linked with the map or with each other) set
    to the preview's extent, at 1:1 aspect.
    """

    def __init__(self) -> None:
        blank = {"image": [], "x": [], "y": [], "dw": [], "dh": []}
        self.amplitude_source = ColumnDataSource(data=dict(blank))
        self.phase_source = ColumnDataSource(data=dict(blank))
        self.amplitude = _image_figure("Aperture amplitude", PREVIEW_FRAME, AMPLITUDE_NAME)
        self.phase = _image_figure("Aperture phase (rad)", PREVIEW_FRAME, PHASE_NAME)
        self._length_fmts = []
        for fig, src, mapper, name in (
            (
                self.amplitude,
                self.amplitude_source,
                LinearColorMapper(palette=Greys256, low=0.0, high=1.0),
                "amplitude",
            ),
            (
                self.phase,
                self.phase_source,
                LinearColorMapper(
                    palette=colorcet.colorwheel, low=-math.pi, high=math.pi, nan_color="#0b0e14"
                ),
                "phase",
            ),
        ):
            r = fig.image(
                image="image", x="x", y="y", dw="dw", dh="dh", source=src, color_mapper=mapper
            )
            fig.add_layout(ColorBar(color_mapper=mapper, width=10, padding=4), "right")
            length, _ = hover_formatters(3)
            self._length_fmts.append(length)
            unit = " rad" if name == "phase" else ""
            fig.add_tools(
                HoverTool(
                    renderers=[r],
                    tooltips=[
                        ("x", "$x{custom} mm"),
                        ("y", "$y{custom} mm"),
                        (name, f"@image{{0.000}}{unit}"),
                    ],
                    formatters={"$x": length, "$y": length},
                )
            )
        self._extent: tuple[float, float, float, float] | None = None

    def show(self, x: np.ndarray, y: np.ndarray, t: np.ndarray) -> None:
        """Show the transmittance ``t`` on the axes ``x``, ``y`` (m); frame its extent."""
        amp = np.abs(t)
        phase = np.where(amp > 0, np.angle(t), np.nan)
        x0, x1 = (v * _MM for v in image_extent(x))
        y0, y1 = (v * _MM for v in image_extent(y))
        geometry = {"x": [x0], "y": [y0], "dw": [x1 - x0], "dh": [y1 - y0]}
        self.amplitude_source.data = {"image": [amp.astype(np.float32)], **geometry}
        self.phase_source.data = {"image": [phase.astype(np.float32)], **geometry}
        step = min((x1 - x0) / max(amp.shape[1], 1), (y1 - y0) / max(amp.shape[0], 1))
        for fmt in self._length_fmts:
            fmt.args = {"decimals": axis_decimals(step)}
        extent = (x0, x1, y0, y1)
        frame = frame_size(x1 - x0, y1 - y0, PREVIEW_FRAME)
        for fig in (self.amplitude, self.phase):
            if (fig.frame_width, fig.frame_height) != frame:
                fig.frame_width, fig.frame_height = frame
            _set_frame(fig, *extent, reframe=True)
        self._extent = extent

    @property
    def extent(self) -> tuple[float, float, float, float] | None:
        """The aperture frame shown (x0, x1, y0, y1) in mm, or None before the first."""
        return self._extent
