"""What the dashboard shows: the screen map, the aperture and the report cards.

Each function here turns a result (or a setup) into one HoloViews element or one
piece of HTML (the cuts are in server.cutplot); none of them computes a diffraction
pattern. Axes are in mm, irradiance in W/m². User-supplied text is escaped before it
goes into HTML.
"""

from __future__ import annotations

import html
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import holoviews as hv
import numpy as np
from bokeh.models import Span

from compute import analytic, metrics
from compute.model import Setup
from server import cutplot

__all__ = [
    "COLOUR_MAPS",
    "ClosedForm",
    "aperture_view",
    "closed_form",
    "crosshair_spans",
    "map_view",
    "numbers_card",
    "read_numbers",
    "validity_card",
]

#: Perceptually uniform colour maps offered for the irradiance map.
COLOUR_MAPS = {
    "inferno": "inferno",
    "viridis": "viridis",
    "magma": "magma",
    "cividis": "cividis",
    "fire": "fire",  # colorcet
    "grey": "gray",
}
#: Dynamic range shown on the logarithmic scale (decades below the peak); the cuts
#: (server.cutplot) use the same.
LOG_DECADES = cutplot.LOG_DECADES
_MM = 1e3

_X = hv.Dimension("x", label="x", unit="mm")
_Y = hv.Dimension("y", label="y", unit="mm")
_I = hv.Dimension("irradiance", label="irradiance", unit="W/m²")


# ------------------------------------------------------------------------ screen map


def _display_floor(peak: float) -> float:
    return peak * 10.0**-LOG_DECADES if peak > 0 else 1e-30


def map_view(
    x: np.ndarray, y: np.ndarray, intensity: np.ndarray, *, scale: str, cmap: str
) -> hv.Image:
    """The irradiance map, axes in mm, with a hover readout of x, y and W/m²."""
    data = np.asarray(intensity, dtype=np.float64)
    peak = float(np.max(data)) if data.size else 0.0
    opts: dict = {}
    if scale == "log":
        floor = _display_floor(peak)
        data = np.maximum(data, floor)
        opts = {"cnorm": "log", "clim": (floor, max(peak, floor * 10))}
    img = hv.Image((x * _MM, y * _MM, data), kdims=[_X, _Y], vdims=[_I])
    return img.opts(
        cmap=COLOUR_MAPS.get(cmap, cmap),
        colorbar=True,
        tools=["hover", "tap"],
        hover_tooltips=[
            ("x", "$x{0.000} mm"),
            ("y", "$y{0.000} mm"),
            ("irradiance", "@image{0.000e+0} W/m²"),
        ],
        responsive=True,
        height=420,
        framewise=True,
        toolbar="above",
        title="Screen irradiance",
        **opts,
    )


def crosshair_spans() -> tuple[Span, Span]:
    """The vertical and horizontal lines through the chosen point of the map.

    Plain Bokeh models that the dashboard adds to the map's figure once and then
    moves by their ``location`` (mm): a click moves two numbers, not a plot.
    """
    style = {"line_color": "#38d9c6", "line_width": 1, "line_dash": "dashed"}
    return Span(dimension="height", location=0.0, **style), Span(
        dimension="width", location=0.0, **style
    )


def nearest(axis: np.ndarray, value: float) -> int:
    """Index of the sample of ``axis`` nearest ``value``."""
    return int(np.clip(np.argmin(np.abs(axis - value)), 0, len(axis) - 1))


# ---------------------------------------------------------------------- closed forms


@dataclass(frozen=True)
class ClosedForm:
    """A closed-form irradiance ``fn(x, y)`` (m -> W/m²) and what it is."""

    fn: Callable[[np.ndarray, np.ndarray], np.ndarray] | None
    label: str


def _rotate(x: np.ndarray, y: np.ndarray, angle: float, x0=0.0, y0=0.0):
    c, s = math.cos(angle), math.sin(angle)
    dx, dy = x - x0, y - y0
    return c * dx + s * dy, -s * dx + c * dy


def _as_grating(elements) -> tuple[int, float, float, float, float, float] | None:
    """Identical rects equally spaced along x -> (count, period, width, height, x0, y0)."""
    if len(elements) < 2 or any(e.shape != "rect" for e in elements):
        return None
    first = elements[0]
    same = all(
        e.width == first.width
        and e.height == first.height
        and e.y == first.y
        and e.angle == 0.0
        and e.transmission == first.transmission
        and e.phase == first.phase
        for e in elements
    )
    if not same:
        return None
    xs = sorted(e.x for e in elements)
    steps = np.diff(xs)
    period = float(steps[0])
    if period < first.width or not np.allclose(steps, period, rtol=1e-9, atol=0.0):
        return None
    return len(elements), period, first.width, first.height, float(np.mean(xs)), first.y


def closed_form(setup: Setup, method: str, variant: str = "") -> ClosedForm:
    """The closed form for this setup's aperture at the method used, if there is one.

    Fraunhofer forms (rect, circle, annulus, grating, a row of identical slits)
    apply when the method is the far field, or the screen sits in the back focal
    plane of the lens. The Fresnel forms (a rect, a straight edge) apply to the
    near-field methods. Only a uniform, untilted, monochromatic plane wave from a
    point-like source qualifies (a spectrum or a source size washes the fringes out,
    which these forms do not show).

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.3–4.5 and §5.2 (the lens
    focal plane as a Fourier plane); Born & Wolf, Principles of Optics, 7th ed.,
    §8.5–8.7.
    """
    src, ap, scr = setup.source, setup.aperture, setup.screen
    none = "no closed form for this aperture"
    if src.kind != "plane" or src.tilt_x != 0.0 or src.tilt_y != 0.0:
        return ClosedForm(
            None, "no closed form for this source (plane wave at normal incidence only)"
        )
    if ap.background != "opaque" and not (len(ap.elements) == 1 and ap.elements[0].shape == "edge"):
        return ClosedForm(None, none)
    els = list(ap.elements)
    if not els or (any(e.transmission <= 0.0 for e in els) and ap.background == "opaque"):
        return ClosedForm(None, none)
    if (src.spectrum != "none" and src.bandwidth > 0.0) or src.source_diameter > 0.0:
        return ClosedForm(
            None, "no closed form for a broad-band or extended source (monochromatic point only)"
        )
    lam, z = src.wavelength, scr.distance
    focal = scr.lens_focal_length
    far = method == "fraunhofer" and (focal is None or math.isclose(z, focal, rel_tol=1e-9))
    if focal is not None and not far:
        return ClosedForm(None, "no closed form with a lens away from its focal plane")
    row = _as_grating(els)
    if far and (len(els) == 1 or row):
        e = els[0]
        i0 = src.irradiance * e.transmission**2
        if row:
            n, d, w, h, _, _ = row
            return ClosedForm(
                lambda x, y: analytic.grating_fraunhofer(x, y, n, d, w, h, lam, z, i0),
                f"closed form: {n} slits, Fraunhofer",
            )
        if e.shape == "rect":

            def fn(x, y, e=e):
                u, v = _rotate(x, y, e.angle)
                return analytic.rect_fraunhofer(u, v, e.width, e.height, lam, z, i0)

            return ClosedForm(fn, "closed form: rectangle, Fraunhofer")
        if e.shape == "grating":

            def fn(x, y, e=e):
                u, v = _rotate(x, y, e.angle)
                return analytic.grating_fraunhofer(
                    u, v, e.count, e.period, e.width, e.height, lam, z, i0
                )

            return ClosedForm(fn, "closed form: grating, Fraunhofer")
        if e.shape == "circle":
            return ClosedForm(
                lambda x, y: analytic.circle_fraunhofer(np.hypot(x, y), e.diameter, lam, z, i0),
                "closed form: Airy pattern",
            )
        if e.shape == "annulus":
            return ClosedForm(
                lambda x, y: analytic.annulus_fraunhofer(
                    np.hypot(x, y), e.diameter, e.inner_diameter, lam, z, i0
                ),
                "closed form: annulus, Fraunhofer",
            )
        return ClosedForm(None, none)
    if not far and len(ap.elements) == 1 and focal is None:
        e = ap.elements[0]
        i0 = src.irradiance * e.transmission**2
        if e.shape == "rect" and ap.background == "opaque":

            def fn(x, y, e=e):
                u, v = _rotate(x, y, e.angle, e.x, e.y)
                return analytic.rect_fresnel(u, v, e.width, e.height, lam, z, i0)

            return ClosedForm(fn, "closed form: rectangle, Fresnel integrals")
        if e.shape == "edge" and e.transmission == 0.0 and ap.background == "clear":
            # A clear plane with an opaque half-plane at x' >= 0: the lit side is x' < 0.
            def fn(x, y, e=e):
                u, _ = _rotate(x, y, e.angle, e.x, e.y)
                return analytic.knife_edge(-u, lam, z, src.irradiance)

            return ClosedForm(fn, "closed form: straight edge, Fresnel integrals")
        if e.shape == "edge" and ap.background == "opaque":

            def fn(x, y, e=e):
                u, _ = _rotate(x, y, e.angle, e.x, e.y)
                return analytic.knife_edge(u, lam, z, i0)

            return ClosedForm(fn, "closed form: straight edge, Fresnel integrals")
    if not far and (row or (len(els) == 1 and els[0].shape in ("circle", "annulus", "grating"))):
        return ClosedForm(
            None, "no closed form at this distance (this aperture has one in the far field)"
        )
    return ClosedForm(None, none)


# ------------------------------------------------------------------------- aperture


def aperture_view(x: np.ndarray, y: np.ndarray, t: np.ndarray) -> tuple[hv.Image, hv.Image]:
    """Amplitude and phase of the aperture transmittance, axes in mm."""
    amp = np.abs(t)
    phase = np.where(amp > 0, np.angle(t), np.nan)
    kd = [_X, _Y]
    common = {
        "responsive": True,
        "height": 280,
        "colorbar": True,
        "tools": ["hover"],
        "framewise": True,
    }
    a = hv.Image((x * _MM, y * _MM, amp), kdims=kd, vdims=["amplitude"]).opts(
        cmap="gray", clim=(0.0, 1.0), title="Aperture amplitude", **common
    )
    p = hv.Image((x * _MM, y * _MM, phase), kdims=kd, vdims=[hv.Dimension("phase", unit="rad")])
    p = p.opts(cmap="colorwheel", clim=(-math.pi, math.pi), title="Aperture phase", **common)
    return a, p


# ---------------------------------------------------------------------------- numbers


def read_numbers(
    x: np.ndarray, y: np.ndarray, intensity: np.ndarray, power_in: float | None
) -> dict[str, Any]:
    """Numbers read off a screen irradiance map (SI units; None where undefined).

    The headline numbers of :func:`compute.metrics.summary`, the first dark
    fringes either side of the peak along x, and the power through the aperture.
    """
    out: dict[str, Any] = dict(metrics.summary(x, y, intensity))
    out["power_in"] = power_in
    out["first_min_left"] = out["first_min_right"] = None
    if out["peak_x"] is not None and out["peak_y"] is not None:
        coord, row = metrics.cut(x, y, intensity, "x", out["peak_y"])
        found = metrics.minima(coord, row)
        left, right = found[found < out["peak_x"]], found[found > out["peak_x"]]
        out["first_min_left"] = float(left.max()) if left.size else None
        out["first_min_right"] = float(right.min()) if right.size else None
    return out


def _si(v: float | None, unit: str, digits: int = 4) -> str:
    if v is None or not math.isfinite(v):
        return "—"
    return f"{v:.{digits}g} {unit}"


def _length(v: float | None) -> str:
    if v is None:
        return "—"
    a = abs(v)
    if a < 1e-12:
        return "0 µm"
    if a >= 1e-3:
        return f"{v * 1e3:.4g} mm"
    return f"{v * 1e6:.4g} µm"


def numbers_card(numbers: dict, meta: dict, *, cut_label: str) -> str:
    """HTML of the numbers read off the result and how it was computed."""
    n = numbers
    p_in, p_screen = n.get("power_in"), n.get("power")
    frac = 100 * p_screen / p_in if p_in and p_screen is not None else None
    vis = n.get("visibility_x")
    rows = [
        ("Peak irradiance", _si(n["peak"], "W/m²"), "fb-peak"),
        ("Peak at", f"{_length(n['peak_x'])}, {_length(n['peak_y'])}", ""),
        ("Power on the screen", _si(p_screen, "W"), "fb-power"),
        ("Power through the aperture", _si(p_in, "W"), ""),
        ("Fraction on the screen", _si(frac, "%"), ""),
        (
            "Central lobe width (x, y)",
            f"{_length(n['central_lobe_x'])}, {_length(n['central_lobe_y'])}",
            "fb-lobe",
        ),
        (
            "First minima along x",
            f"{_length(n['first_min_left'])}, {_length(n['first_min_right'])}",
            "fb-minima",
        ),
        ("FWHM (x, y)", f"{_length(n['fwhm_x'])}, {_length(n['fwhm_y'])}", ""),
        ("Beam diameter D4σ (x, y)", f"{_length(n['d4sigma_x'])}, {_length(n['d4sigma_y'])}", ""),
        ("Visibility along x", "—" if vis is None else f"{vis:.3f}", "fb-visibility"),
    ]
    grid = meta.get("grid", [0, 0])
    pitch = meta.get("pitch", [0.0, 0.0])
    how = [
        ("Method", f"{meta.get('method', '')} ({meta.get('variant', '')})", "fb-method"),
        ("Aperture grid", f"{grid[1]} × {grid[0]}", ""),
        ("Aperture pitch", f"{_length(pitch[1])} × {_length(pitch[0])}", ""),
        ("Fresnel number", _si(meta.get("fresnel_number"), ""), ""),
        (
            "Compute time",
            f"{meta.get('elapsed_s', 0.0) * 1e3:.0f} ms"
            + (" (cached)" if meta.get("cached") else ""),
            "fb-elapsed",
        ),
        ("Overlay", cut_label, "fb-overlay"),
    ]

    def table(items) -> str:
        body = "".join(
            f'<tr class="{c}"><th>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>'
            for k, v, c in items
        )
        return f'<table class="fb-table">{body}</table>'

    reasons = "".join(f"<li>{html.escape(r)}</li>" for r in meta.get("reasons", []))
    why = (
        f"<details><summary>Why this method</summary><ul>{reasons}</ul></details>"
        if reasons
        else ""
    )
    return (
        f'<div class="fb-card fb-numbers"><h3>Readings</h3>{table(rows)}'
        f"<h3>Computation</h3>{table(how)}{why}</div>"
    )


_VERDICT_TEXT = {"ok": "holds", "marginal": "marginal", "invalid": "does not hold"}


def validity_card(items: list[dict]) -> str:
    """HTML of the validity report: one row per item with its verdict."""
    rows = []
    for it in items:
        verdict = str(it.get("verdict", ""))
        unit = str(it.get("unit", ""))
        badge = html.escape(_VERDICT_TEXT.get(verdict, verdict))
        rows.append(
            f'<tr class="fb-verdict-{html.escape(verdict)}">'
            f"<th>{html.escape(str(it.get('label', it.get('key', ''))))}</th>"
            f"<td>{html.escape(_si(it.get('value'), unit))}</td>"
            f"<td>limit {html.escape(_si(it.get('limit'), unit))}</td>"
            f'<td><span class="fb-badge fb-badge-{html.escape(verdict)}">{badge}</span></td>'
            f"<td>{html.escape(str(it.get('sentence', '')))}</td></tr>"
        )
    verdicts = [it.get("verdict") for it in items]
    overall = "invalid" if "invalid" in verdicts else "marginal" if "marginal" in verdicts else "ok"
    head = {
        "ok": "Every approximation used holds here.",
        "marginal": "Some approximations are marginal here.",
        "invalid": "An approximation does not hold here: read the rows marked.",
    }[overall]
    return (
        f'<div class="fb-card fb-validity" data-overall="{overall}"><h3>Validity</h3>'
        f"<p>{html.escape(head)}</p>"
        f'<table class="fb-table">{"".join(rows)}</table></div>'
    )


def verdict_banner(plan) -> str:
    """HTML of the banner over the map when the result's verdict is invalid, else "".

    Shown only when :attr:`compute.planning.Plan.verdict` is ``'invalid'``: then no
    method was valid within the memory and time budget (for ``auto``) or the chosen
    method does not hold here, and the map is not to be relied on.
    """
    if plan is None or getattr(plan, "verdict", "ok") != "invalid":
        return ""
    bad = [v.label for v in plan.validity if v.verdict == "invalid"]
    return (
        '<div class="fb-verdict-banner" role="alert" data-verdict="invalid">'
        "<strong>Invalid here:</strong> "
        f"{html.escape('; '.join(bad))}. The map below is computed but does not hold "
        "at this setup; see the validity report.</div>"
    )
