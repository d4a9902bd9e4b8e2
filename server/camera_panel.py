"""The camera beside the irradiance map, and the sidebar controls of real sources and cameras.

:class:`CameraPanel` shows the simulated frame of a result that has a camera: the
digital numbers on the sensor's pixel axes (mm, grey), saturated pixels in a colour
of their own, the histogram of the counts with the full-scale line, and one line of
readings (saturated pixels, peak DN, mean photoelectrons, the sampling verdict of the
validity report). It reads ``result.extras`` (``counts``, ``saturated``,
``electrons``, ``camera_x``, ``camera_y``) and computes nothing.

:func:`install` plugs all of it into a dashboard: the spectrum and source
size controls, the camera editor, this panel and the true-colour switch.
"""

from __future__ import annotations

import html
import math
from pathlib import Path
from typing import Any

import holoviews as hv
import numpy as np
import panel as pn

from compute import camera as cam
from compute.model import Camera, Setup
from server import wording
from server.colour_view import TrueColour
from server.controls import CameraEditor, SpectrumControls

__all__ = [
    "MAX_DISPLAY_SIDE",
    "SATURATED_COLOUR",
    "CameraPanel",
    "SourceAndCamera",
    "display_frame",
    "frame_view",
    "histogram_view",
    "install",
    "readings_html",
]

#: Largest frame side sent to the browser; a larger sensor is shown in blocks (means).
MAX_DISPLAY_SIDE = 800
SATURATED_COLOUR = "#ff3d7f"
_MM = 1e3
_X = hv.Dimension("x", label="x", unit="mm")
_Y = hv.Dimension("y", label="y", unit="mm")
_DN = hv.Dimension("counts", label="counts", unit="DN")
_ASSETS = Path(__file__).resolve().parent / "assets"
_VERDICT_TEXT = {"ok": "resolved", "marginal": "marginal", "invalid": "not resolved"}


def _stylesheets() -> list[str]:
    out = []
    for name in ("fringebench.css", "camera.css"):
        path = _ASSETS / name
        if path.exists():
            out.append(path.read_text(encoding="utf-8"))
    return out


_CSS = _stylesheets()


# ------------------------------------------------------------------ pure helpers


def _block_starts(n: int, factor: int) -> np.ndarray:
    return np.arange(0, n, factor)


def display_frame(
    x: np.ndarray, y: np.ndarray, counts: np.ndarray, saturated: np.ndarray, max_side: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, int]:
    """The frame as the browser gets it: at most ``max_side`` pixels a side.

    A larger frame is shown in square blocks of ``factor`` pixels: the mean DN of
    each block, saturated when any of its pixels is, at the mean position of the
    block. Returns ``(x, y, dn, saturated, factor)``; ``factor`` is 1 for the
    frame as it is.
    """
    counts = np.asarray(counts)
    ny, nx = counts.shape
    factor = max(1, math.ceil(max(ny, nx) / max_side))
    if factor == 1:
        return x, y, counts.astype(np.float32), np.asarray(saturated, bool), 1
    iy, ix = _block_starts(ny, factor), _block_starts(nx, factor)
    sums = np.add.reduceat(np.add.reduceat(counts.astype(np.float64), iy, 0), ix, 1)
    sizes = np.outer(np.diff(np.append(iy, ny)), np.diff(np.append(ix, nx)))
    sat = np.maximum.reduceat(
        np.maximum.reduceat(np.asarray(saturated, np.uint8), iy, 0), ix, 1
    ).astype(bool)
    bx = np.add.reduceat(x, ix) / np.diff(np.append(ix, nx))
    by = np.add.reduceat(y, iy) / np.diff(np.append(iy, ny))
    return bx, by, (sums / sizes).astype(np.float32), sat, factor


def frame_view(
    x: np.ndarray, y: np.ndarray, dn: np.ndarray, saturated: np.ndarray, full_scale: int
) -> hv.Overlay:
    """The frame in digital numbers (grey, axes in mm) with saturated pixels marked."""
    common = {"responsive": True, "height": 300, "framewise": True}
    img = hv.Image((x * _MM, y * _MM, dn), kdims=[_X, _Y], vdims=[_DN]).opts(
        cmap="gray",
        clim=(0.0, float(full_scale)),
        colorbar=True,
        tools=["hover"],
        hover_tooltips=[("x", "$x{0.000} mm"), ("y", "$y{0.000} mm"), ("counts", "@image DN")],
        title="Camera frame (DN)",
        toolbar="above",
        **common,
    )
    # The marks are a layer of their own (transparent where nothing saturates), so that
    # every frame has the same layers and the plot updates in place.
    mask = np.where(saturated, 1.0, np.nan).astype(np.float32)
    sat = hv.Image((x * _MM, y * _MM, mask), kdims=[_X, _Y], vdims=["saturated"]).opts(
        cmap=[SATURATED_COLOUR],
        clim=(0.0, 1.0),
        clipping_colors={"NaN": "transparent"},
        **common,
    )
    return (img * sat).opts(hv.opts.Overlay(title="Camera frame (DN)", **common))


def histogram_view(counts: np.ndarray, bit_depth: int) -> hv.Overlay:
    """Pixels per digital number over the whole range, log scale, with full scale marked.

    The bars are rectangles from half a pixel up, so that a logarithmic axis can draw
    them; empty bins have none.
    """
    edges, hist = cam.histogram(counts, bit_depth)
    top = (1 << int(bit_depth)) - 1
    peak = float(hist.max()) if hist.size else 1.0
    lit = hist > 0
    bars = hv.Rectangles(
        (
            edges[:-1][lit],
            np.full(lit.sum(), 0.5),
            edges[1:][lit],
            hist[lit].astype(float),
            hist[lit].astype(float),
        ),
        kdims=[_DN, "pixels_low", "counts_high", "pixels_high"],
        vdims=["pixels"],
    ).opts(color="#8fa3bf", line_color="#8fa3bf", tools=["hover"])
    line = hv.VLine(float(top)).opts(color=SATURATED_COLOUR, line_dash="dashed", line_width=1.5)
    return (bars * line).opts(
        hv.opts.Overlay(
            title=f"Histogram (full scale {top} DN)",
            logy=True,
            ylim=(0.5, max(2.0, peak * 2.0)),
            xlim=(-0.5, top + 0.5),
            ylabel="pixels",
            responsive=True,
            height=170,
            framewise=True,
        )
    )


def readings_html(summary: dict, sampling: dict | None, factor: int) -> str:
    """One line of camera readings as HTML (numbers from :func:`compute.camera.frame_summary`)."""
    n_sat = int(summary["saturated_pixels"])
    share = 100.0 * float(summary["saturated_fraction"])
    mean_e = summary.get("mean_electrons", float("nan"))
    items = [
        ("fb-camera-saturated", "Saturated", f"{n_sat} px ({share:.3g} %)"),
        ("fb-camera-peak", "Peak", f"{summary['peak_dn']} / {summary['full_scale']} DN"),
        ("fb-camera-electrons", "Mean photoelectrons", f"{mean_e:.4g} e⁻"),
    ]
    longest = summary.get("longest_exposure")
    if longest is not None:
        items.append(
            (
                "fb-camera-longest",
                "Longest exposure without saturation",
                f"about {wording.number(longest * 1e3, 3)} ms",
            )
        )
    if sampling is not None:
        verdict = str(sampling.get("verdict", ""))
        text = _VERDICT_TEXT.get(verdict, verdict)
        value = sampling.get("value")
        finite = isinstance(value, float) and math.isfinite(value) and value > 0
        ratio = f" ({value:.3g}× two pixels)" if finite else ""
        items.append(("fb-camera-sampling", "Fringes", f"{text}{ratio}"))
    if factor > 1:
        items.append(("fb-camera-blocks", "Shown", f"in blocks of {factor}×{factor} px"))
    body = "".join(
        f'<span class="fb-camera-reading {c}"><b>{html.escape(k)}</b> {html.escape(v)}</span>'
        for c, k, v in items
    )
    verdict = html.escape(str((sampling or {}).get("verdict", "")))
    sentence = html.escape(str((sampling or {}).get("sentence", "")))
    return (
        f'<div class="fb-camera-readings" data-sampling="{verdict}" title="{sentence}">{body}</div>'
    )


# --------------------------------------------------------------------- the panel


class CameraPanel:
    """The camera slot of one dashboard, fed by its result hook."""

    def __init__(self, dash: Any):
        self.dash = dash
        # Own axes: the sensor is not the screen window that the map and cuts share.
        self.frame_pane = pn.pane.HoloViews(
            None, sizing_mode="stretch_width", css_classes=["fb-camera-frame"], linked_axes=False
        )
        self.histogram_pane = pn.pane.HoloViews(
            None,
            sizing_mode="stretch_width",
            css_classes=["fb-camera-histogram"],
            linked_axes=False,
        )
        self.readings = pn.pane.HTML(
            "", stylesheets=_CSS, sizing_mode="stretch_width", css_classes=["fb-camera-line"]
        )
        self.summary: dict | None = None
        self._frame_pipe: hv.streams.Pipe | None = None
        self._hist_pipe: hv.streams.Pipe | None = None
        dash.camera_slot.objects = [self.frame_pane, self.histogram_pane, self.readings]
        dash.camera_slot.width = 440
        dash.result_hooks.append(self.show)
        self._publish(None)

    def _send(self, frame: tuple, hist: tuple) -> None:
        """Show a frame and its histogram, updating the plots in place once they exist."""
        if self._frame_pipe is None:
            self._frame_pipe = hv.streams.Pipe(data=frame)
            self._hist_pipe = hv.streams.Pipe(data=hist)
            self.frame_pane.object = hv.DynamicMap(
                lambda data: frame_view(*data), streams=[self._frame_pipe]
            )
            self.histogram_pane.object = hv.DynamicMap(
                lambda data: histogram_view(*data), streams=[self._hist_pipe]
            )
        else:
            self._frame_pipe.send(frame)
            self._hist_pipe.send(hist)

    def hide(self) -> None:
        self.dash.camera_slot.visible = False
        self.summary = None
        self._publish(None)

    def show(self, setup: Setup, result: Any) -> None:
        """Show the frame of ``result`` (taken with ``setup``'s camera), or hide the slot."""
        extras = getattr(result, "extras", {}) or {}
        camera = setup.camera
        if camera is None or "counts" not in extras:
            self.hide()
            return
        counts = np.asarray(extras["counts"])
        saturated = np.asarray(extras["saturated"], bool)
        x, y, dn, sat, factor = display_frame(
            np.asarray(extras["camera_x"]),
            np.asarray(extras["camera_y"]),
            counts,
            saturated,
            MAX_DISPLAY_SIDE,
        )
        top = cam.full_scale(camera)
        summary = dict(cam.frame_summary(extras, camera))
        summary["mean_electrons"] = float(np.mean(extras["electrons"]))
        summary["longest_exposure"] = wording.longest_exposure(
            float(camera.exposure), float(summary["peak_electrons"]), float(camera.full_well)
        )
        sampling = next((v.to_dict() for v in result.validity if v.key == "camera_sampling"), None)
        self._send((x, y, dn, sat, top), (counts, int(camera.bit_depth)))
        self.readings.object = readings_html(summary, sampling, factor)
        self.summary = summary
        self.dash.camera_slot.visible = True
        self._publish(
            {
                "on": 1,
                "shape": f"{counts.shape[0]}x{counts.shape[1]}",
                "display": f"{dn.shape[0]}x{dn.shape[1]}",
                "factor": factor,
                "sum": int(counts.sum(dtype=np.int64)),
                "peak": summary["peak_dn"],
                "full-scale": top,
                "saturated": summary["saturated_pixels"],
                "sampling": "" if sampling is None else sampling["verdict"],
            }
        )

    def _publish(self, values: dict | None) -> None:
        extra = self.dash.state_extra
        for key in [k for k in extra if k.startswith("camera-")]:
            del extra[key]
        extra["camera-on"] = 0
        for k, v in (values or {}).items():
            extra[f"camera-{k}"] = v


# ------------------------------------------------------------------ installation


class SourceAndCamera:
    """Spectrum, source size, camera and true colour of one dashboard, and their edits."""

    def __init__(self, dash: Any):
        self.dash = dash
        self.spectrum = SpectrumControls(self._set_source)
        self.camera = CameraEditor(self.set_camera_value, self.set_camera)
        dash.extra_source_controls.objects = [self.spectrum.panel()]
        dash.camera_controls.objects = [self.camera.panel()]
        for c in self.spectrum.controls:
            dash._controls_by_path[c.path] = c  # units in the dashboard's range messages
        self.panel = CameraPanel(dash)
        self.colour = TrueColour(dash)
        dash.setup_hooks.append(self.refresh)
        self.refresh(dash.setup)

    def refresh(self, setup: Setup | None = None) -> None:
        """Show the committed setup in these controls."""
        setup = self.dash.setup if setup is None else setup
        self.spectrum.refresh(setup)
        self.camera.refresh(setup)

    def _set_source(self, path: str, value: object) -> bool:
        ok = self.dash.set_value(path, value)
        if not ok:
            self.refresh()
        return ok

    def set_camera(self, on: bool) -> bool:
        """Add a camera (model defaults, centred on the screen window) or remove it."""
        screen = self.dash.setup.screen

        def change(s: Setup) -> None:
            s.camera = Camera(offset_x=screen.x, offset_y=screen.y) if on else None

        ok = self.dash._edit(change)
        self.refresh()
        return ok

    def set_camera_value(self, path: str, value: object) -> bool:
        """Set one camera setting (SI) when it is valid; else say why and change nothing."""
        name = path.removeprefix("camera.")
        problem = self.camera.check(path, value)
        if problem is None and isinstance(value, float) and not math.isfinite(value):
            problem = f"{path}: a finite number is needed"
        if problem is not None:
            self.dash.notify("error", problem)
            self.refresh()
            return False

        def change(s: Setup) -> None:
            if s.camera is None:
                raise ValueError(f"{path}: there is no camera; switch it on first")
            if name not in s.camera.param or name == "name":
                raise ValueError(f"{path}: no such setting")
            try:
                setattr(s.camera, name, value)
            except ValueError as exc:
                raise ValueError(f"{path}: {exc}") from None

        ok = self.dash._edit(change)
        if not ok:
            self.refresh()
        return ok


def install(dash: Any) -> SourceAndCamera:
    """Add the source and camera controls, the camera panel and true colour to ``dash``."""
    return SourceAndCamera(dash)
