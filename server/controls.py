"""Widgets bound to setup parameters: display units at the edge, SI inside.

Every control edits one snapshot path (``screen.distance``,
``aperture.elements[1].width``) and reports the new value in SI units to a
callback; it never writes into a setup itself. The callback (the dashboard)
validates the change on a copy and either commits it or asks the control to
show the committed value again, so that a rejected input changes nothing.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import panel as pn
import param

from compute.model import ELEMENT_TYPES, Camera, Element, Numerics, Screen, Setup, Source
from server import wording

__all__ = [
    "CAMERA_FIELDS",
    "ELEMENT_FIELDS",
    "SPECTRUM_FIELDS",
    "UNITS",
    "CameraEditor",
    "ChoiceControl",
    "ElementEditor",
    "QuantityControl",
    "SetupControls",
    "SpectrumControls",
    "element_summary",
    "format_vertices",
    "parse_vertices",
    "path_label",
    "to_display",
    "to_si",
]

OnChange = Callable[[str, object], None]

#: Display unit -> SI factor (SI value = display value × factor).
UNITS: dict[str, float] = {
    "nm": 1e-9,
    "µm": 1e-6,
    "mm": 1e-3,
    "m": 1.0,
    "mW": 1e-3,
    "W": 1.0,
    "W/m²": 1.0,
    "°": math.pi / 180.0,
    "rad": 1.0,
    "mrad": 1e-3,
    "µrad": 1e-6,
    "ms": 1e-3,
    "e⁻": 1.0,
    "": 1.0,
}


def to_display(value_si: float, unit: str) -> float:
    """SI value -> display value in ``unit``, rounded to 15 significant digits.

    The rounding hides float noise from the conversion (0.1 mm shown as
    0.1, not 0.09999999999999999) without losing anything a user can type.
    """
    v = value_si / UNITS[unit]
    return float(f"{v:.15g}")


def to_si(value_display: float, unit: str) -> float:
    """Display value in ``unit`` -> SI value, rounded to 15 significant digits."""
    return float(f"{value_display * UNITS[unit]:.15g}")


def _fmt(v: float) -> str:
    return f"{v:.6g}"


#: How number boxes show their value: up to six decimals, no trailing zeros.
NUMBER_FORMAT = "0.[000000]"
#: Below this distance (m) the distance control also says it in mm or µm.
SHORT_DISTANCE = 0.1


@dataclass(frozen=True)
class Field:
    """How one parameter is shown: display unit, label and an optional slider range."""

    name: str
    unit: str
    label: str
    soft: tuple[float, float] | None = None  # slider range in display units
    step: float | None = None


class QuantityControl:
    """A number widget for one setup path, in display units, bounded by the model.

    Parameters
    ----------
    path
        Snapshot path of the parameter, e.g. ``screen.distance``.
    p
        The model parameter (its bounds become the hard bounds of the widget).
    field
        Display unit, label and slider range.
    on_change
        Called with ``(path, value_in_si)`` when the user commits a new value
        (on release for sliders, on Enter or leaving the box for inputs).
    """

    def __init__(self, path: str, p: param.Parameter, field: Field, on_change: OnChange):
        self.path = path
        self.unit = field.unit
        self.name = field.label
        self.integer = isinstance(p, param.Integer)
        self._on_change = on_change
        self._muted = False
        lo, hi = p.bounds if p.bounds is not None else (None, None)
        self.lower = None if lo is None else to_display(lo, self.unit)
        self.upper = None if hi is None else to_display(hi, self.unit)
        inclusive = getattr(p, "inclusive_bounds", (True, True))
        self.lower_open = lo is not None and not inclusive[0]
        self.upper_open = hi is not None and not inclusive[1]
        self.label = f"{field.label} ({self.unit})" if self.unit else field.label
        css = ["fb-" + path.replace(".", "-").replace("_", "-")]
        if path.startswith("aperture.elements"):
            css = ["fb-el-" + path.split(".")[-1].replace("_", "-")]
        elif path == "screen.distance":
            css.append("fb-distance")
        common = {"label": self.label, "css_classes": css, "sizing_mode": "stretch_width"}
        # The widgets get no hard bounds: the browser would clamp a value typed beyond
        # them and send the bound instead (or nothing), so that a refused value went
        # unsaid. Every value reaches the dashboard, which refuses it in words.
        if field.soft is not None and not self.integer:
            lo_s, hi_s = field.soft
            self.widget = pn.widgets.EditableFloatSlider(
                start=lo_s,
                end=hi_s,
                step=field.step or (hi_s - lo_s) / 200.0,
                value=lo_s,
                format=NUMBER_FORMAT,
                **common,
            )
            self.widget.param.watch(self._changed, "value_throttled")
            # A value typed into the slider's box that is refused may arrive as ``value``
            # alone (not ``value_throttled``): it is said at once all the same.
            self.widget.param.watch(self._typed, "value")
        elif self.integer:
            self.widget = pn.widgets.IntInput(
                step=int(field.step or 1),
                value=int(self.lower or 0),
                **common,
            )
            self.widget.param.watch(self._changed, "value")
        else:
            self.widget = pn.widgets.FloatInput(
                step=field.step or 0.1,
                value=self.lower if self.lower is not None else 0.0,
                format=NUMBER_FORMAT,
                **common,
            )
            self.widget.param.watch(self._changed, "value")
        self._shown: float | None = None
        self._refused: tuple[float, float] | None = None  # (value, second it came)

    def check(self, value: float | None, current: float | None = None) -> str | None:
        """Why ``value`` (display units) is refused, in the control's words; None when fine.

        ``current`` (display units) is the value the control keeps, said at the end.
        """
        return wording.refusal(
            self.name,
            self.unit,
            value,
            self.lower,
            self.upper,
            lower_open=self.lower_open,
            upper_open=self.upper_open,
            current=current,
            integer=self.integer,
        )

    @property
    def shown(self) -> float | None:
        """The last valid value the control showed, in display units."""
        return self._shown

    def _typed(self, event: param.parameterized.Event) -> None:
        if self._muted or event.new is None:
            return
        if self.check(float(event.new)) is not None:
            self._changed(event)

    def _changed(self, event: param.parameterized.Event) -> None:
        if self._muted:
            return
        now = time.monotonic()
        last = self._refused
        if event.new is not None and last and last[0] == event.new and now - last[1] < 0.5:
            return  # the same refused value again at once (the slider reports it twice)
        bad = event.new is not None and self.check(float(event.new)) is not None
        self._refused = (event.new, now) if bad else None
        if event.new is None:  # an emptied box: refused like any value that is no number
            self._on_change(self.path, None)
            return
        if self.integer:
            self._on_change(self.path, int(event.new))
        else:
            self._on_change(self.path, to_si(float(event.new), self.unit))

    def show(self, value_si: float | None) -> None:
        """Display ``value_si`` without reporting a change."""
        if value_si is None:
            return
        shown = int(value_si) if self.integer else to_display(float(value_si), self.unit)
        self._shown = shown
        self._muted = True
        try:
            w = self.widget
            if isinstance(w, pn.widgets.EditableFloatSlider):
                # Widen the soft range so that the value sits on the slider, with room
                # beyond it: nearby values then leave the range alone, and a range that
                # changed with every value would redraw the box under the user's typing.
                if shown < w.start:
                    start = shown - 0.5 * (w.end - shown)
                    w.start = start if self.lower is None else max(self.lower, start)
                if shown > w.end:
                    end = shown + 0.5 * (shown - w.start)
                    w.end = end if self.upper is None else min(self.upper, end)
            w.value = shown
            if self.path == "screen.distance":
                # Short distances also in mm (or µm), with their significant digits.
                extra = ""
                if 0 < float(value_si) < SHORT_DISTANCE:
                    extra = f" = {wording.length(float(value_si))}"
                w.label = self.label + extra
        finally:
            self._muted = False

    def restore(self) -> None:
        """Show the last valid value again after a refusal (and the slider's own range)."""
        w = self.widget
        self._muted = True
        try:
            if isinstance(w, pn.widgets.EditableFloatSlider):
                # The browser widened the slider to the refused value; put its range back.
                start, end = w.start, w.end
                if self.lower is not None:
                    start = max(start, self.lower)
                if self.upper is not None:
                    end = min(end, self.upper)
                w.param.update(start=start, end=end)
                w.param.trigger("start", "end")
            if self._shown is not None:
                w.value = self._shown
                w.param.trigger("value")
        finally:
            self._muted = False


class ChoiceControl:
    """A selector for one setup path (``source.kind``, ``numerics.method``…)."""

    def __init__(
        self,
        path: str,
        options: dict[str, str] | list[str],
        label: str,
        on_change: OnChange,
        *,
        buttons: bool = False,
    ):
        self.path = path
        self._on_change = on_change
        self._muted = False
        css = ["fb-" + path.replace(".", "-").replace("_", "-")]
        kind = pn.widgets.RadioButtonGroup if buttons else pn.widgets.Select
        first = next(iter(options.values())) if isinstance(options, dict) else options[0]
        kw = {"color": "primary", "variant": "outline"} if buttons else {}
        self.widget = kind(
            label=label,
            options=options,
            value=first,
            css_classes=css,
            sizing_mode="stretch_width",
            **kw,
        )
        self.widget.param.watch(self._changed, "value")

    def _changed(self, event: param.parameterized.Event) -> None:
        if not self._muted:
            self._on_change(self.path, event.new)

    def show(self, value: object) -> None:
        self._muted = True
        try:
            self.widget.value = value
        finally:
            self._muted = False


# ----------------------------------------------------------------- the setup panel

SOURCE_FIELDS = [
    Field("wavelength", "nm", "Wavelength", soft=(350.0, 1100.0), step=0.1),
    Field("irradiance", "W/m²", "Irradiance"),
    Field("power", "mW", "Power"),
    Field("waist", "mm", "Waist radius (1/e²)"),
    Field("waist_offset", "mm", "Waist before aperture"),
    Field("distance", "mm", "Source distance"),
    Field("tilt_x", "°", "Tilt about y"),
    Field("tilt_y", "°", "Tilt about x"),
]
#: Which source fields a kind of source uses (tilts apply to all).
SOURCE_KIND_FIELDS = {
    "plane": {"wavelength", "irradiance", "tilt_x", "tilt_y"},
    "gaussian": {"wavelength", "power", "waist", "waist_offset", "tilt_x", "tilt_y"},
    "point": {"wavelength", "power", "distance", "tilt_x", "tilt_y"},
}
SCREEN_FIELDS = [
    Field("distance", "m", "Distance", soft=(0.001, 5.0), step=0.001),
    Field("width", "mm", "Window width"),
    Field("height", "mm", "Window height"),
    Field("x", "mm", "Window centre x"),
    Field("y", "mm", "Window centre y"),
    Field("samples", "", "Pixels across", step=50),
    Field("lens_focal_length", "mm", "Lens focal length"),
]
METHOD_LABELS = {
    "automatic": "auto",
    "Fraunhofer (far field)": "fraunhofer",
    "Fresnel": "fresnel",
    "angular spectrum": "angular_spectrum",
    "Rayleigh–Sommerfeld (direct)": "rayleigh_sommerfeld",
}

#: Element fields by shape, in the order the editor shows them.
_COMMON_FIELDS = [
    Field("x", "µm", "Centre x"),
    Field("y", "µm", "Centre y"),
    Field("angle", "°", "Rotation"),
    Field("transmission", "", "Amplitude transmission", step=0.05),
    Field("phase", "rad", "Phase"),
]
ELEMENT_FIELDS: dict[str, list[Field]] = {
    "rect": [Field("width", "µm", "Width", step=1.0), Field("height", "µm", "Height")],
    "circle": [Field("diameter", "µm", "Diameter", step=1.0)],
    "annulus": [
        Field("diameter", "µm", "Outer diameter", step=1.0),
        Field("inner_diameter", "µm", "Inner diameter", step=1.0),
    ],
    "grating": [
        Field("count", "", "Openings"),
        Field("period", "µm", "Period", step=1.0),
        Field("width", "µm", "Opening width", step=1.0),
        Field("height", "µm", "Height"),
    ],
    "edge": [],
    "polygon": [],
    "image": [Field("width", "µm", "Width"), Field("height", "µm", "Height")],
}
SHAPE_LABELS = {
    "rect": "rectangle / slit",
    "circle": "circle",
    "annulus": "annulus",
    "grating": "grating",
    "edge": "straight edge",
    "polygon": "polygon",
    "image": "image mask",
}


def element_summary(el: Element) -> str:
    """A short description of an element in display units, for the element table."""

    def um(v: float) -> str:
        return _fmt(to_display(v, "µm"))

    size = {
        "rect": lambda: f"{um(el.width)} × {um(el.height)} µm",
        "circle": lambda: f"⌀ {um(el.diameter)} µm",
        "annulus": lambda: f"⌀ {um(el.diameter)} / {um(el.inner_diameter)} µm",
        "grating": lambda: f"{el.count} × {um(el.width)} µm, period {um(el.period)} µm",
        "edge": lambda: "half-plane x′ ≥ 0",
        "polygon": lambda: f"{len(el.vertices)} vertices",
        "image": lambda: f"{um(el.width)} × {um(el.height)} µm mask",
    }[el.shape]()
    return size


def format_vertices(vertices: list[list[float]]) -> str:
    """Vertices in metres -> text ``x, y; x, y; ...`` in µm."""
    return "; ".join(
        f"{_fmt(to_display(x, 'µm'))}, {_fmt(to_display(y, 'µm'))}" for x, y in vertices
    )


def parse_vertices(text: str) -> list[list[float]]:
    """Text ``x, y; x, y; ...`` in µm -> vertices in metres.

    Raises
    ------
    ValueError
        With a plain message naming the vertex that cannot be read.
    """
    out = []
    parts = [p for p in text.replace("\n", ";").split(";") if p.strip()]
    for i, part in enumerate(parts):
        xy = part.replace(" ", ",").split(",")
        xy = [c for c in xy if c.strip()]
        try:
            x, y = (float(c) for c in xy)
        except ValueError:
            raise ValueError(
                f"vertex {i + 1} '{part.strip()}' is not two numbers 'x, y' in µm"
            ) from None
        if not (math.isfinite(x) and math.isfinite(y)):
            raise ValueError(f"vertex {i + 1} is not finite")
        out.append([to_si(x, "µm"), to_si(y, "µm")])
    return out


class ElementEditor:
    """The controls of one element: its common fields and those of its shape."""

    def __init__(self, index: int, el: Element, on_change: OnChange):
        self.index = index
        self.shape = el.shape
        prefix = f"aperture.elements[{index}]"
        self.controls: list[QuantityControl] = []
        for f in ELEMENT_FIELDS[el.shape] + _COMMON_FIELDS:
            c = QuantityControl(f"{prefix}.{f.name}", el.param[f.name], f, on_change)
            c.show(getattr(el, f.name))
            self.controls.append(c)
        extra: list[pn.viewable.Viewable] = []
        if el.shape == "polygon":
            self.vertices = pn.widgets.TextAreaInput(
                label="Vertices, µm (x, y; x, y; …)",
                value=format_vertices(el.vertices),
                css_classes=["fb-el-vertices"],
                sizing_mode="stretch_width",
                height=80,
            )

            def _vertices(event: param.parameterized.Event) -> None:
                on_change(f"{prefix}.vertices", event.new)  # text; the dashboard parses

            self.vertices.param.watch(_vertices, "value")
            extra.append(self.vertices)
        if el.shape == "image":
            self.upload = pn.widgets.FileInput(
                accept=".png,image/png",
                css_classes=["fb-el-image"],
                sizing_mode="stretch_width",
            )

            def _image(event: param.parameterized.Event) -> None:
                if event.new:
                    on_change(f"{prefix}.data", event.new)  # bytes; the dashboard encodes

            self.upload.param.watch(_image, "value")
            extra += [
                pn.pane.Markdown("Mask PNG (grey level = amplitude):", margin=(0, 5)),
                self.upload,
            ]
        title = pn.pane.Markdown(
            f"**Element {index + 1}: {SHAPE_LABELS[el.shape]}**", margin=(0, 5)
        )
        widgets = [c.widget for c in self.controls]
        self.panel = pn.Column(
            title,
            pn.GridBox(*widgets, ncols=2, sizing_mode="stretch_width"),
            *extra,
            sizing_mode="stretch_width",
            css_classes=["fb-element-editor"],
        )


class SetupControls:
    """Source, screen and numerics controls; ``refresh`` shows a setup's values."""

    def __init__(self, on_change: OnChange):
        self.on_change = on_change
        self.kind = ChoiceControl(
            "source.kind",
            {"plane wave": "plane", "Gaussian beam": "gaussian", "point source": "point"},
            "Source",
            on_change,
        )
        self.source = {
            f.name: QuantityControl(f"source.{f.name}", Source.param[f.name], f, on_change)
            for f in SOURCE_FIELDS
        }
        self.screen = {
            f.name: QuantityControl(f"screen.{f.name}", Screen.param[f.name], f, on_change)
            for f in SCREEN_FIELDS
        }
        self.lens = pn.widgets.Checkbox(
            label="Thin lens behind the aperture", css_classes=["fb-lens"], value=False
        )
        self._lens_muted = False
        self.lens.param.watch(self._lens_toggled, "value")
        self.method = ChoiceControl("numerics.method", METHOD_LABELS, "Method", on_change)
        self.grid = QuantityControl(
            "numerics.grid",
            Numerics.param["grid"],
            Field("grid", "", "Aperture grid (0 = automatic)", step=256),
            on_change,
        )
        self.precision = ChoiceControl(
            "numerics.precision", ["single", "double"], "Precision", on_change
        )
        self.background = ChoiceControl(
            "aperture.background",
            {"opaque background": "opaque", "clear background": "clear"},
            "Background",
            on_change,
            buttons=True,
        )

    def _lens_toggled(self, event: param.parameterized.Event) -> None:
        if self._lens_muted:
            return
        focal = self.screen["lens_focal_length"].widget.value
        value = to_si(focal, "mm") if event.new and focal else (0.1 if event.new else None)
        self.on_change("screen.lens_focal_length", value)

    def source_panel(self) -> pn.Column:
        return pn.Column(
            self.kind.widget,
            *(c.widget for c in self.source.values()),
            sizing_mode="stretch_width",
        )

    def screen_panel(self) -> pn.Column:
        s = self.screen
        return pn.Column(
            s["distance"].widget,
            pn.Row(s["width"].widget, s["height"].widget, sizing_mode="stretch_width"),
            pn.Row(s["x"].widget, s["y"].widget, sizing_mode="stretch_width"),
            s["samples"].widget,
            self.lens,
            s["lens_focal_length"].widget,
            sizing_mode="stretch_width",
        )

    def numerics_panel(self) -> pn.Column:
        return pn.Column(
            self.method.widget,
            self.grid.widget,
            self.precision.widget,
            sizing_mode="stretch_width",
        )

    def refresh(self, setup: Setup) -> None:
        """Show the values of ``setup`` in every control, reporting no change."""
        src = setup.source
        self.kind.show(src.kind)
        used = SOURCE_KIND_FIELDS[src.kind]
        for name, c in self.source.items():
            c.show(getattr(src, name))
            c.widget.visible = name in used
        for name, c in self.screen.items():
            c.show(getattr(setup.screen, name))
        focal = setup.screen.lens_focal_length
        self._lens_muted = True
        try:
            self.lens.value = focal is not None
        finally:
            self._lens_muted = False
        self.screen["lens_focal_length"].widget.visible = focal is not None
        self.method.show(setup.numerics.method)
        self.grid.show(setup.numerics.grid)
        self.precision.show(setup.numerics.precision)
        self.background.show(setup.aperture.background)

    def control_for(self, path: str) -> QuantityControl | None:
        """The quantity control editing ``path`` (None for elements and choices)."""
        section, _, name = path.partition(".")
        table = {"source": self.source, "screen": self.screen}.get(section, {})
        if path == "numerics.grid":
            return self.grid
        return table.get(name)


def new_element(shape: str) -> Element:
    """A fresh element of ``shape`` with the model's defaults."""
    return ELEMENT_TYPES[shape]()


# ---------------------------------------------------- spectrum, source size and camera

#: Spectrum shapes as the selector shows them.
SPECTRUM_LABELS = {"monochromatic": "none", "Gaussian": "gaussian", "flat band": "flat"}
SPECTRUM_FIELDS = [
    Field("bandwidth", "nm", "Bandwidth", step=1.0),
    Field("spectral_samples", "", "Spectral samples (0 = automatic)"),
    Field("source_diameter", "mrad", "Source angular diameter", step=0.01),
]
#: What the bandwidth means for each spectrum shape.
BANDWIDTH_LABELS = {"gaussian": "Bandwidth, FWHM", "flat": "Bandwidth, full width"}

CAMERA_FIELDS = [
    Field("pixel_pitch", "µm", "Pixel pitch", step=0.1),
    Field("pixels_x", "", "Pixels across (x)", step=64),
    Field("pixels_y", "", "Pixels down (y)", step=64),
    Field("offset_x", "mm", "Sensor centre x"),
    Field("offset_y", "mm", "Sensor centre y"),
    Field("fill_factor", "", "Fill factor", step=0.05),
    Field("quantum_efficiency", "", "Quantum efficiency", step=0.05),
    Field("exposure", "ms", "Exposure", step=0.01),
    Field("full_well", "e⁻", "Full well", step=1000),
    Field("bit_depth", "", "Bit depth"),
    Field("read_noise", "e⁻", "Read noise, rms", step=0.5),
    Field("seed", "", "Noise seed"),
]


def _label(field: Field, text: str | None = None) -> str:
    text = text or field.label
    return f"{text} ({field.unit})" if field.unit else text


class SpectrumControls:
    """The source's spectrum (shape, width, samples) and its angular size.

    Each control reports ``(path, value_si)`` to ``on_change`` like every other
    control; the bandwidth and the sample count show only for a broad spectrum.
    """

    def __init__(self, on_change: OnChange):
        self.shape = ChoiceControl("source.spectrum", SPECTRUM_LABELS, "Spectrum", on_change)
        self.fields = {f.name: f for f in SPECTRUM_FIELDS}
        self.quantities = {
            f.name: QuantityControl(f"source.{f.name}", Source.param[f.name], f, on_change)
            for f in SPECTRUM_FIELDS
        }

    @property
    def controls(self) -> list[QuantityControl]:
        return list(self.quantities.values())

    def panel(self) -> pn.Column:
        q = self.quantities
        return pn.Column(
            self.shape.widget,
            q["bandwidth"].widget,
            q["spectral_samples"].widget,
            q["source_diameter"].widget,
            sizing_mode="stretch_width",
            css_classes=["fb-spectrum-controls"],
        )

    def refresh(self, setup: Setup) -> None:
        """Show the spectrum and source size of ``setup``, reporting no change."""
        src = setup.source
        self.shape.show(src.spectrum)
        broad = src.spectrum != "none"
        for name, c in self.quantities.items():
            c.show(getattr(src, name))
            if name != "source_diameter":
                c.widget.visible = broad
        if broad:
            text = BANDWIDTH_LABELS[src.spectrum]
            self.quantities["bandwidth"].widget.label = _label(self.fields["bandwidth"], text)


class CameraEditor:
    """The camera section: a switch that adds or removes it, then its settings.

    ``on_toggle(bool)`` is called when the user adds (True) or removes the camera;
    every setting reports ``("camera.<name>", value_si)`` to ``on_change``.
    """

    def __init__(self, on_change: OnChange, on_toggle: Callable[[bool], None]):
        self._on_toggle = on_toggle
        self._muted = False
        self.toggle = pn.widgets.Checkbox(
            label="Camera on the screen plane", value=False, css_classes=["fb-camera-toggle"]
        )
        self.toggle.param.watch(self._toggled, "value")
        self.quantities = {
            f.name: QuantityControl(f"camera.{f.name}", Camera.param[f.name], f, on_change)
            for f in CAMERA_FIELDS
        }
        self.shot_noise = pn.widgets.Checkbox(
            label="Photon shot noise", value=True, css_classes=["fb-camera-shot-noise"]
        )

        def _shot(event: param.parameterized.Event) -> None:
            if not self._muted:
                on_change("camera.shot_noise", bool(event.new))

        self.shot_noise.param.watch(_shot, "value")
        q = self.quantities
        self.settings = pn.Column(
            pn.Row(q["pixel_pitch"].widget, q["bit_depth"].widget, sizing_mode="stretch_width"),
            pn.Row(q["pixels_x"].widget, q["pixels_y"].widget, sizing_mode="stretch_width"),
            pn.Row(q["offset_x"].widget, q["offset_y"].widget, sizing_mode="stretch_width"),
            pn.Row(
                q["fill_factor"].widget,
                q["quantum_efficiency"].widget,
                sizing_mode="stretch_width",
            ),
            pn.Row(q["exposure"].widget, q["full_well"].widget, sizing_mode="stretch_width"),
            pn.Row(q["read_noise"].widget, q["seed"].widget, sizing_mode="stretch_width"),
            self.shot_noise,
            visible=False,
            sizing_mode="stretch_width",
        )

    @property
    def controls(self) -> list[QuantityControl]:
        return list(self.quantities.values())

    def _toggled(self, event: param.parameterized.Event) -> None:
        if not self._muted:
            self._on_toggle(bool(event.new))

    def panel(self) -> pn.Column:
        return pn.Column(
            self.toggle, self.settings, sizing_mode="stretch_width", css_classes=["fb-camera"]
        )

    def check(self, path: str, value_si: object) -> str | None:
        """A plain message naming the setting when ``value_si`` is outside the model's bounds."""
        name = path.removeprefix("camera.")
        c = self.quantities.get(name)
        if c is None or isinstance(value_si, bool):
            return None
        if value_si is None:
            return c.check(None, c.shown)
        if not isinstance(value_si, (int, float)):
            return None
        shown = value_si if c.integer else to_display(float(value_si), c.unit)
        return c.check(shown, c.shown)

    def refresh(self, setup: Setup) -> None:
        """Show the camera of ``setup`` (or its absence), reporting no change."""
        cam = setup.camera
        self._muted = True
        try:
            self.toggle.value = cam is not None
            self.settings.visible = cam is not None
            if cam is not None:
                for name, c in self.quantities.items():
                    c.show(getattr(cam, name))
                self.shot_noise.value = bool(cam.shot_noise)
        finally:
            self._muted = False


# ------------------------------------------------------------- labels of snapshot paths

_PATH_LABELS_EXTRA = {
    "source.kind": "Source",
    "source.spectrum": "Spectrum",
    "screen.distance": "Screen distance",
    "numerics.grid": "Aperture grid",
    "numerics.method": "Method",
    "numerics.precision": "Precision",
    "aperture.background": "Background",
    "aperture.elements": "the aperture's elements",
    "camera.shot_noise": "Photon shot noise",
}


def path_label(path: str) -> str:
    """The label a person sees for a snapshot path; the path itself when it has none.

    ``screen.samples`` -> ``Pixels across``; ``aperture.elements[1].width`` ->
    ``element 2 width``.
    """
    m = wording.PATH.fullmatch(path.strip())
    if m is None:
        return path
    section, rest, index, name = m.groups()
    if index is not None:
        el = f"element {int(index) + 1}"
        if name is None:
            return el
        fields = [f for fs in ELEMENT_FIELDS.values() for f in fs] + _COMMON_FIELDS
        label = next((f.label for f in fields if f.name == name), name.replace("_", " "))
        return f"{el} {label[0].lower()}{label[1:]}"
    if path in _PATH_LABELS_EXTRA:
        return _PATH_LABELS_EXTRA[path]
    sections = {
        "source": SOURCE_FIELDS + SPECTRUM_FIELDS,
        "screen": SCREEN_FIELDS,
        "camera": CAMERA_FIELDS,
    }
    for f in sections.get(section, []):
        if f.name == rest:
            return f.label
    return path
