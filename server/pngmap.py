"""The screen irradiance map as a small PNG: perceptual colour map, colour bar, scale bar.

Used by ``fringebench render --png``. The picture keeps the physical aspect of the
screen window (+x to the right, +y up), labels its colour bar in W/m² and draws a
scale bar in millimetres under the map.
"""

from __future__ import annotations

import io
import math

import numpy as np
from bokeh import palettes
from PIL import Image, ImageDraw, ImageFont

__all__ = ["PALETTES", "irradiance_png", "nice_length"]

# Perceptually uniform palettes, 256 entries each, dark (low) to light (high).
PALETTES = {
    "inferno": palettes.Inferno256,
    "viridis": palettes.Viridis256,
    "cividis": palettes.Cividis256,
    "magma": palettes.Magma256,
}

_MAP_SIDE = 720  # longest side of the map, px
_MIN_SIDE = 48  # shortest side of the map, px (only very elongated windows hit it)
_PAD = 14
_BAR_W = 18
_INK = (40, 40, 40)
_FAINT = (110, 110, 110)
_CAUTION = "Computed irradiance, not a laser-safety assessment."
_LOG_DECADES = 6


def _fonts() -> tuple[ImageFont.ImageFont, ImageFont.ImageFont, bool]:
    """Regular and small font, and whether they draw ² and × (DejaVu does)."""
    try:
        return (
            ImageFont.truetype("DejaVuSans.ttf", 12),
            ImageFont.truetype("DejaVuSans.ttf", 10),
            True,
        )
    except OSError:  # no system font: Pillow's own face, ASCII only
        return ImageFont.load_default(size=13), ImageFont.load_default(size=11), False


def _lut(name: str) -> np.ndarray:
    try:
        table = PALETTES[name]
    except KeyError:
        raise ValueError(f"unknown palette {name!r}; one of {', '.join(PALETTES)}") from None
    return np.array([[int(h[i : i + 2], 16) for i in (1, 3, 5)] for h in table], dtype=np.uint8)


def nice_length(target: float) -> float:
    """The 1-2-5 number nearest below ``target`` (> 0): a readable scale-bar length."""
    exp = math.floor(math.log10(target))
    for mant in (5.0, 2.0, 1.0):
        value = mant * 10.0**exp
        if value <= target:
            return value
    return 10.0**exp


def _linear_ticks(vmax: float, n: int = 5) -> list[float]:
    step = nice_length(vmax / (n - 1)) if vmax > 0 else 1.0
    count = math.floor(vmax / step + 1e-9)
    return [k * step for k in range(count + 1)]


def _label(v: float) -> str:
    if v == 0:
        return "0"
    if 1e-2 <= abs(v) < 1e4:
        return f"{v:.4g}"
    return f"{v:.2g}".replace("e+0", "e").replace("e-0", "e-").replace("e+", "e")


def _fit(width_m: float, height_m: float) -> tuple[int, int]:
    """Map size in px with the window's aspect, longest side ``_MAP_SIDE``."""
    aspect = width_m / height_m if height_m > 0 else 1.0
    if aspect >= 1:
        return _MAP_SIDE, max(_MIN_SIDE, round(_MAP_SIDE / aspect))
    return max(_MIN_SIDE, round(_MAP_SIDE * aspect)), _MAP_SIDE


def irradiance_png(
    x: np.ndarray,
    y: np.ndarray,
    intensity: np.ndarray,
    *,
    palette: str = "inferno",
    log: bool = False,
    title: str = "Irradiance on the screen",
) -> bytes:
    """Render an irradiance map ``intensity[j, i]`` at ``(x[i], y[j])`` as PNG bytes.

    Parameters
    ----------
    x, y
        Pixel centres, m, increasing.
    intensity
        Irradiance, W/m², shape ``(len(y), len(x))``.
    palette
        One of :data:`PALETTES`.
    log
        Logarithmic colour scale over the top six decades.
    title
        Text above the map.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    data = np.nan_to_num(np.asarray(intensity, dtype=np.float64), nan=0.0, posinf=0.0)
    data = np.clip(data, 0.0, None)
    if data.shape != (y.size, x.size):
        raise ValueError(f"intensity has shape {data.shape}, expected {(y.size, x.size)}")
    lut = _lut(palette)
    dx = (x[-1] - x[0]) / (x.size - 1) if x.size > 1 else 1.0
    dy = (y[-1] - y[0]) / (y.size - 1) if y.size > 1 else dx
    width_m, height_m = x.size * dx, y.size * dy
    map_w, map_h = _fit(width_m, height_m)

    # Resample the numbers, not the colours; row 0 of the picture is the top (largest y).
    img = Image.fromarray(np.ascontiguousarray(data[::-1]).astype(np.float32), mode="F")
    shrink = map_w < x.size or map_h < y.size
    img = img.resize((map_w, map_h), Image.Resampling.BOX if shrink else Image.Resampling.NEAREST)
    shown = np.asarray(img, dtype=np.float64)

    vmax = float(data.max())
    if log:
        top = vmax if vmax > 0 else 1.0
        lo = top * 10.0**-_LOG_DECADES
        level = (np.log10(np.clip(shown, lo, top)) - math.log10(lo)) / _LOG_DECADES
    else:
        top = vmax if vmax > 0 else 1.0
        level = shown / top
    index = np.clip(np.round(level * 255), 0, 255).astype(np.uint8)
    rgb = Image.fromarray(lut[index], mode="RGB")

    font, small, rich = _fonts()
    unit, times = ("W/m²", "×") if rich else ("W/m^2", "x")
    bar_h = max(map_h, 160)
    label_w = 70
    top_y = _PAD + 22
    canvas_w = _PAD + map_w + _PAD + _BAR_W + 6 + label_w
    canvas_h = top_y + bar_h + 56
    canvas = Image.new("RGB", (canvas_w, canvas_h), (255, 255, 255))
    draw = ImageDraw.Draw(canvas)
    draw.text((_PAD, _PAD), title, fill=_INK, font=font)
    canvas.paste(rgb, (_PAD, top_y))
    draw.rectangle([_PAD - 1, top_y - 1, _PAD + map_w, top_y + map_h], outline=_INK)

    # Colour bar: top of the bar is the largest irradiance.
    bar_x = _PAD + map_w + _PAD
    ramp = np.linspace(255, 0, bar_h).round().astype(np.uint8)
    bar = Image.fromarray(np.repeat(lut[ramp][:, None, :], _BAR_W, axis=1), mode="RGB")
    canvas.paste(bar, (bar_x, top_y))
    draw.rectangle([bar_x - 1, top_y - 1, bar_x + _BAR_W, top_y + bar_h], outline=_INK)
    draw.text((bar_x, top_y - 18), unit, fill=_INK, font=font)
    if log:
        lo_exp = math.floor(math.log10(lo) + 1e-9)
        ticks = [
            (10.0**e, (e - math.log10(lo)) / _LOG_DECADES)
            for e in range(lo_exp, math.floor(math.log10(top)) + 1)
            if 10.0**e >= lo * (1 - 1e-9)
        ]
    else:
        ticks = [(t, t / top) for t in _linear_ticks(top)]
    for value, frac in ticks:
        ty = top_y + round((1.0 - frac) * (bar_h - 1))
        draw.line([bar_x + _BAR_W, ty, bar_x + _BAR_W + 4, ty], fill=_INK)
        draw.text((bar_x + _BAR_W + 7, ty - 7), _label(value), fill=_INK, font=small)

    # Scale bar under the map, in millimetres.
    bar_len_m = nice_length(0.25 * width_m) if width_m > 0 else 0.0
    if bar_len_m > 0:
        px = max(1, round(bar_len_m / width_m * map_w))
        sy = top_y + bar_h + 14
        draw.rectangle([_PAD, sy, _PAD + px, sy + 5], fill=_INK)
        draw.text((_PAD + px + 8, sy - 4), f"{bar_len_m * 1e3:g} mm", fill=_INK, font=font)
    # The window runs from the outer edge of the first pixel to that of the last.
    window = (
        f"window {width_m * 1e3:.4g} mm {times} {height_m * 1e3:.4g} mm, "
        f"centre ({(x[0] + x[-1]) * 500:.4g}, {(y[0] + y[-1]) * 500:.4g}) mm"
    )
    draw.text((_PAD, top_y + bar_h + 30), window, fill=_FAINT, font=small)
    draw.text((_PAD, top_y + bar_h + 43), _CAUTION, fill=_FAINT, font=small)

    buf = io.BytesIO()
    canvas.save(buf, format="PNG", optimize=True)
    return buf.getvalue()
