"""The screen in true colour: a display-only switch and the map as the eye would see it.

The colour comes from :func:`compute.colour.true_colour_image` (CIE 1931 2° observer to
sRGB, for monochromatic and broad-band sources); nothing is recomputed when the switch
changes. Light that the eye does not see (outside 380–780 nm) has no colour: the switch
is disabled then and says why. The switch is saved in the snapshot's ``view`` section
as ``"true_colour": true/false``.
"""

from __future__ import annotations

import html
from typing import Any

import holoviews as hv
import numpy as np
import panel as pn
import param

from compute import colour, spectrum
from compute.model import Source

__all__ = [
    "INVISIBLE_TEXT",
    "VIEW_KEY",
    "TrueColour",
    "colour_view",
    "mean_rgb",
    "visible_light",
]

VIEW_KEY = "true_colour"
INVISIBLE_TEXT = "no true colour: the light lies outside the visible band (380–780 nm)"
_MM = 1e3
_X = hv.Dimension("x", label="x", unit="mm")
_Y = hv.Dimension("y", label="y", unit="mm")
# Wavelength step used to ask whether any part of a band is visible.
_BAND_STEP = 1e-9


def visible_light(source: Source) -> bool:
    """True when some of the source's light falls where the eye sees (CIE 1931 observer)."""
    if source.spectrum == "none" or source.bandwidth == 0.0:
        lam = np.array([source.wavelength])
    else:
        lo, hi = spectrum.support(source.spectrum, source.wavelength, source.bandwidth)
        n = int(min(4096, max(2, np.ceil((hi - lo) / _BAND_STEP) + 1)))
        lam = np.linspace(lo, hi, n)
    return bool(np.any(colour.cmf(lam) > 0.0))


def colour_view(x: np.ndarray, y: np.ndarray, rgb: np.ndarray) -> hv.RGB:
    """An sRGB image (ny, nx, 3) of uint8 on the screen axes (m), shown in mm like the map."""
    rgb = np.asarray(rgb)
    channels = [rgb[..., c].astype(np.float64) / 255.0 for c in range(3)]
    img = hv.RGB((x * _MM, y * _MM, *channels), kdims=[_X, _Y], vdims=list("RGB"))
    return img.opts(
        tools=["hover", "tap"],
        responsive=True,
        height=420,
        framewise=True,
        toolbar="above",
        title="Screen in true colour (sRGB, as the eye would see it)",
    )


def mean_rgb(rgb: np.ndarray) -> tuple[float, float, float]:
    """Mean of each sRGB channel of a uint8 image, 0 to 255."""
    a = np.asarray(rgb, dtype=np.float64).reshape(-1, 3)
    m = a.mean(axis=0) if a.size else np.zeros(3)
    return float(m[0]), float(m[1]), float(m[2])


class TrueColour:
    """The true-colour switch of one dashboard and the image it puts on the map.

    The dashboard's map callback asks :attr:`shown` when it builds the map and then
    :meth:`view` for the image; whenever the answer changes this object has the map
    rebuilt (a DynamicMap holds one kind of element).
    """

    def __init__(self, dash: Any):
        self.dash = dash
        self.built_with = False  # what the map was last built to show
        self._muted = False
        self._rgb: np.ndarray | None = None
        self._rgb_of: Any = None
        self.toggle = pn.widgets.Checkbox(
            label="True colour", value=False, css_classes=["fb-true-colour"], width=110
        )
        self.note = pn.pane.HTML("", css_classes=["fb-true-colour-note"], margin=(8, 5))
        self.widget = pn.Row(self.toggle, self.note, margin=0, css_classes=["fb-true-colour-row"])
        self.toggle.param.watch(self._toggled, "value")
        dash.view_extra[VIEW_KEY] = False
        dash.view_hooks.append(self.apply_view)
        dash.setup_hooks.append(self.setup_changed)
        dash.result_hooks.append(self.result_shown)
        self.setup_changed(dash.setup)

    # ---------------------------------------------------------------- state

    @property
    def on(self) -> bool:
        return bool(self.toggle.value)

    def _result_source(self) -> Source | None:
        d = self.dash
        if d.result is None:
            return None
        setup = d._result_setup if d._result_setup is not None else d.setup
        return setup.source

    @property
    def shown(self) -> bool:
        """The map shows true colour: the switch is on and the shown result's light is visible."""
        src = self._result_source()
        return self.on and src is not None and visible_light(src)

    def rgb(self) -> np.ndarray | None:
        """The sRGB image of the shown result (cached per result), or None."""
        d = self.dash
        src = self._result_source()
        if src is None:
            return None
        if self._rgb_of is not d.result:
            self._rgb = colour.true_colour_image(d.result, src)
            self._rgb_of = d.result
        return self._rgb

    def view(self, data: tuple | None = None) -> hv.RGB:
        """The map's true-colour image (black when the shown light became invisible)."""
        d = self.dash
        rgb = self.rgb() if self.shown else None
        r = d.result
        if rgb is None:
            x, y, z = data if data is not None else (r.x, r.y, r.intensity)
            rgb = np.zeros((*np.shape(z), 3), dtype=np.uint8)
            return colour_view(np.asarray(x), np.asarray(y), rgb)
        return colour_view(r.x, r.y, rgb)

    # ---------------------------------------------------------------- events

    def _toggled(self, event: param.parameterized.Event) -> None:
        if self._muted:
            return
        self.dash.view_extra[VIEW_KEY] = bool(event.new)
        self._redraw()
        if not self.dash._applying_view:
            self.dash._mirror_url()

    def apply_view(self, view: dict) -> None:
        """A loaded view section sets the switch (off when it does not say)."""
        value = view.get(VIEW_KEY, False)
        on = value if isinstance(value, bool) else False
        self._muted = True
        try:
            self.toggle.value = on
        finally:
            self._muted = False
        self.dash.view_extra[VIEW_KEY] = on
        self._redraw()

    def setup_changed(self, setup: Any) -> None:
        """Enable the switch for visible light only, and say why otherwise."""
        visible = visible_light(setup.source)
        self.toggle.disabled = not visible
        text = "" if visible else INVISIBLE_TEXT
        self.note.object = (
            f'<span class="fb-note" title="{html.escape(text)}">{html.escape(text)}</span>'
            if text
            else ""
        )
        self._publish()

    def result_shown(self, setup: Any, result: Any) -> None:
        self._redraw(update_state=False)

    def _redraw(self, *, update_state: bool = True) -> None:
        d = self.dash
        if d._plots_built and self.shown != self.built_with:
            d._send_map()  # the map figure swaps its image in place
        self._publish()
        if update_state:
            d._update_state()

    def _publish(self) -> None:
        """Test-readable state: the switch, whether colour is shown, the light's visibility."""
        extra = self.dash.state_extra
        extra["colour-on"] = int(self.on)
        extra["colour-shown"] = int(self.shown and self.built_with)
        extra["colour-visible"] = int(not self.toggle.disabled)
        if self.shown:
            rgb = self.rgb()
            if rgb is not None:
                extra["colour-mean"] = ",".join(f"{v:.3f}" for v in mean_rgb(rgb))
        else:
            extra.pop("colour-mean", None)
