"""Aperture elements -> complex transmittance on a pixel grid, area-weighted at edges.

Each element has a *coverage*: the fraction of every pixel square that it covers,
a float in [0, 1]. The aperture starts from its background (0 for 'opaque', 1
for 'clear') and every element is painted over it in list order,
``t <- t·(1 − c) + c·v`` with ``v = transmission·exp(i·phase)``; an image element
multiplies ``v`` by its grey level, area-weighted over the pixel.

How each coverage is computed (all continuous in every size and position, so a
result changes smoothly when a width changes by less than one pixel):

* axis-aligned rect and grating (angle a multiple of π/2): exact, the separable
  product of 1-D overlap lengths; the grating uses a closed-form running measure
  of its openings, so any count costs the same.
* polygons, rotated rects and the footprint of rotated images: exact area of the
  polygon inside each pixel, by signed-area accumulation along scan rows (the
  winding-number form of Green's theorem; the accumulation-buffer technique of
  scanline polygon rasterisers — common practice, no source).
* the edge (half-plane): exact, the distribution function of the pixel square
  projected onto the edge normal (a sum of two uniform variables).
* circles and annuli: the same half-plane coverage applied to the distance from
  the circle, its radius shrunk to cancel the dx² term of the area error that
  the curvature leaves; disks under 16 pixels across are supersampled.
* rotated gratings: the openings' 1-D indicator box-filtered across the ramp
  width ``|n_x|·dx + |n_y|·dy`` along each axis of the element (exact for
  straight edges along an axis, area-preserving to first order elsewhere).
* images: exact box-overlap resampling at multiples of π/2
  (``T = R_y · img · R_xᵀ``); otherwise bilinear interpolation sampled on a
  supersampled grid, weighted by the exact footprint of each sub-pixel
  (mean-preserving, see :func:`_bilinear_grey`).

Work happens in row blocks of the element's bounding box (plus one pixel), so
memory stays bounded on large grids.
"""

from __future__ import annotations

import cmath
import functools
import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy import sparse

from compute.model import (
    Annulus,
    Aperture,
    Circle,
    Edge,
    Element,
    Grating,
    Image,
    Polygon,
    Rect,
)
from compute.pngdata import decode_png_data_url

__all__ = [
    "aperture_bounds",
    "area",
    "coverage",
    "element_bounds",
    "feature_size",
    "smallest_feature",
    "transmittance",
]

Bounds = tuple[float, float, float, float]

_BLOCK = 1 << 20  # grid samples per work block: keeps temporaries to a few MB
_AXIS_TOL = 1e-12  # rad; an angle this close to a multiple of π/2 counts as exact
_SMALL_DISK_PX = 16.0  # disks narrower than this many pixels are supersampled
_MAX_DISK_SUPERSAMPLE = 64
_MAX_IMAGE_SUPERSAMPLE = 16
_SNAP = 1e-12  # rounding residue of the polygon accumulation
_UNIFORM_TOL = 1e-6  # relative spread of the spacing accepted as a uniform axis


# --------------------------------------------------------------------------- grid


@dataclass(frozen=True)
class _Raster:
    """Pixel centres ``x`` (nx,), ``y`` (ny,) at pitch ``dx``, ``dy``."""

    x: np.ndarray
    y: np.ndarray
    dx: float
    dy: float

    @property
    def shape(self) -> tuple[int, int]:
        return (self.y.size, self.x.size)

    def window(self, bounds: Bounds) -> tuple[int, int, int, int]:
        """Rows ``j0:j1``, columns ``i0:i1`` of pixels meeting ``bounds``, plus one each side."""
        x0, x1, y0, y1 = bounds
        i0, i1 = _index_range(self.x[0], self.dx, self.x.size, x0, x1)
        j0, j1 = _index_range(self.y[0], self.dy, self.y.size, y0, y1)
        return j0, j1, i0, i1


def _index_range(first: float, pitch: float, n: int, lo: float, hi: float) -> tuple[int, int]:
    # Pixel i meets [lo, hi] when first + (i ± 0.5)·pitch straddles it.
    if not lo <= hi:
        return 0, 0
    a = np.clip((lo - first) / pitch - 0.5, -2.0, n + 2.0)
    b = np.clip((hi - first) / pitch + 0.5, -2.0, n + 2.0)
    i0 = math.floor(a)  # = first meeting pixel − 1: one spare
    i1 = math.ceil(b) + 1  # = last meeting pixel + 2 (exclusive): one spare
    i0, i1 = max(i0, 0), min(i1, n)
    return (i0, i1) if i0 < i1 else (0, 0)


def _raster(x, y, pitch) -> _Raster:
    axes = []
    for name, arr, k in (("x", x, 0), ("y", y, 1)):
        a = np.asarray(arr, dtype=np.float64)
        if a.ndim != 1 or a.size == 0:
            raise ValueError(f"{name} must be a non-empty 1-D array of pixel centres")
        if not np.all(np.isfinite(a)):
            raise ValueError(f"{name} holds NaN or infinite values")
        given = None
        if pitch is not None:
            try:
                given = float(pitch[k])
            except (TypeError, ValueError, IndexError):
                message = f"pitch must be a pair (dx, dy) in metres, got {pitch!r}"
                raise ValueError(message) from None
            if not (math.isfinite(given) and given > 0):
                raise ValueError(f"pitch {name} must be positive and finite, got {given!r}")
        if a.size > 1:
            step = (a[-1] - a[0]) / (a.size - 1)
            if not step > 0:
                raise ValueError(f"{name} must increase")
            if np.max(np.abs(np.diff(a) - step)) > _UNIFORM_TOL * step:
                raise ValueError(f"{name} must be uniformly spaced")
            if given is not None and abs(given - step) > _UNIFORM_TOL * step:
                raise ValueError(
                    f"pitch {name} {given:g} m disagrees with the spacing of {name}, {step:g} m"
                )
        elif given is None:
            raise ValueError(f"{name} has a single sample: give pitch=(dx, dy)")
        else:
            step = given
        axes.append((a, step))
    (xa, dx), (ya, dy) = axes
    return _Raster(xa, ya, dx, dy)


def _row_blocks(n_rows: int, row_cost: int) -> Iterator[tuple[int, int]]:
    step = max(1, _BLOCK // max(1, row_cost))
    for r0 in range(0, n_rows, step):
        yield r0, min(n_rows, r0 + step)


# ----------------------------------------------------------------------- angles


def _turns(angle: float) -> int | None:
    """``k mod 4`` when ``angle`` is ``k·π/2`` (within :data:`_AXIS_TOL`), else None."""
    k = round(angle / (0.5 * math.pi))
    if abs(angle - k * 0.5 * math.pi) <= _AXIS_TOL:
        return k % 4
    return None


def _cos_sin(angle: float) -> tuple[float, float]:
    k = _turns(angle)
    if k is not None:
        return ((1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (0.0, -1.0))[k]
    return math.cos(angle), math.sin(angle)


# --------------------------------------------------------- 1-D overlap profiles


def _slab_1d(u: np.ndarray, width: float, half: float) -> np.ndarray:
    """Fraction of each box ``[u − width/2, u + width/2]`` inside ``[−half, half]``."""
    lo = u - 0.5 * width
    hi = u + 0.5 * width
    return np.clip(np.minimum(hi, half) - np.maximum(lo, -half), 0.0, width) / width


def _comb_measure(s: np.ndarray, count: int, period: float, width: float):
    """Measure of the openings left of ``s`` as ``m·width + r`` (``s`` from the first left end).

    Opening k spans ``[k·period, k·period + width]``; keeping the whole-opening
    count ``m`` apart from the remainder ``r`` avoids cancellation when two
    measures are subtracted.
    """
    m = np.floor(s / period)
    r = np.clip(s - m * period, 0.0, width)
    outside = (s < 0) | (m >= count)
    m = np.where(s < 0, 0.0, np.minimum(m, count))
    r = np.where(outside, 0.0, r)
    return m, r


def _comb_1d(u: np.ndarray, width: float, count: int, period: float, opening: float) -> np.ndarray:
    """Fraction of each box ``[u ± width/2]`` inside ``count`` openings centred on 0."""
    left = -0.5 * ((count - 1) * period + opening)
    m1, r1 = _comb_measure(u + 0.5 * width - left, count, period, opening)
    m0, r0 = _comb_measure(u - 0.5 * width - left, count, period, opening)
    return np.clip(((m1 - m0) * opening + (r1 - r0)) / width, 0.0, 1.0)


def _halfplane_cover(s, a, b):
    """Fraction of a pixel inside a half-plane whose boundary is at signed distance ``s``.

    ``s > 0`` when the pixel centre is inside; ``a = |n_x|·dx`` and ``b = |n_y|·dy``
    are the pixel sides projected on the unit normal ``n``. The projection of the
    uniform pixel square is the sum of two uniform variables of widths ``a`` and
    ``b`` (a trapezoidal density), and the coverage is its distribution function
    (common practice, no source).
    """
    big = np.maximum(a, b)
    small = np.minimum(a, b)
    t = np.abs(s)
    with np.errstate(divide="ignore", invalid="ignore"):
        linear = t / big
        quadratic = 0.5 - (0.5 * (big + small) - t) ** 2 / (2.0 * big * small)
    half = np.where(
        t <= 0.5 * (big - small), linear, np.where(t >= 0.5 * (big + small), 0.5, quadratic)
    )
    return 0.5 + np.copysign(half, s)


# ---------------------------------------------------------------------- disks


def _subsamples(centres: np.ndarray, pitch: float, factor: int) -> np.ndarray:
    offsets = ((np.arange(factor) + 0.5) / factor - 0.5) * pitch
    return (centres[:, None] + offsets[None, :]).ravel()


def _disk_supersample(radius: float, pitch: float) -> int:
    across = 2.0 * radius / pitch
    if across >= _SMALL_DISK_PX:
        return 1
    return min(_MAX_DISK_SUPERSAMPLE, math.ceil(_SMALL_DISK_PX / across))


def _disk_cover(
    radius: float, X: np.ndarray, Y: np.ndarray, dx: float, dy: float, factor: int | None = None
) -> np.ndarray:
    """Coverage of the disk of ``radius`` about the origin at pixel centres ``X``, ``Y``."""
    if radius <= 0 or X.size == 0 or Y.size == 0:
        return np.zeros((Y.size, X.size))
    if factor is None:
        factor = _disk_supersample(radius, max(dx, dy))
    if factor == 1:
        return _disk_cover_direct(radius, X, Y, dx, dy)
    fine = _disk_cover_direct(
        radius,
        _subsamples(X, dx, factor),
        _subsamples(Y, dy, factor),
        dx / factor,
        dy / factor,
    )
    return fine.reshape(Y.size, factor, X.size, factor).mean(axis=(1, 3))


def _disk_cover_direct(
    radius: float, X: np.ndarray, Y: np.ndarray, dx: float, dy: float
) -> np.ndarray:
    """Disk coverage as the local half-plane coverage of the distance to the circle.

    Integrating the half-plane coverage over a circle of radius ``R`` gives
    ``π R² + π (dx² + dy²) / 24`` (the variance of the projected pixel, averaged
    over directions); the radius is shrunk to cancel that term. Only a band of
    pixels within half a pixel diagonal of the circle is evaluated; the rest is
    0 or 1 by row spans.
    """
    ny, nx = Y.size, X.size
    out = np.zeros((ny, nx))
    r2 = radius * radius - (dx * dx + dy * dy) / 24.0
    if r2 <= 0:
        return out  # far below one pixel: nothing that this grid can show
    r_eff = math.sqrt(r2)
    reach = 0.5 * math.hypot(dx, dy)  # largest half-width of the projected pixel
    r_in, r_out = r_eff - reach, r_eff + reach
    Y2 = Y * Y

    out_half = np.sqrt(np.clip(r_out * r_out - Y2, 0.0, None))
    olo = np.clip(np.searchsorted(X, -out_half, "left") - 1, 0, nx)
    ohi = np.clip(np.searchsorted(X, out_half, "right") + 1, 0, nx)
    none = r_out * r_out <= Y2
    olo[none] = 0
    ohi[none] = 0
    if r_in > 0:
        in_half = np.sqrt(np.clip(r_in * r_in - Y2, 0.0, None))
        ilo = np.searchsorted(X, -in_half, "left") + 1  # one pixel inward for safety
        ihi = np.searchsorted(X, in_half, "right") - 1
        empty = (r_in * r_in <= Y2) | (ilo >= ihi)
        ilo[empty] = olo[empty]
        ihi[empty] = olo[empty]
    else:
        ilo = olo.copy()
        ihi = olo.copy()
    ilo = np.clip(ilo, olo, ohi)
    ihi = np.clip(ihi, ilo, ohi)

    for j in np.flatnonzero(ihi > ilo):
        out[j, ilo[j] : ihi[j]] = 1.0

    rows, cols = _span_indices(np.concatenate([olo, ihi]), np.concatenate([ilo, ohi]))
    if rows.size:
        Xb, Yb = X[cols], Y[rows]
        r = np.hypot(Xb, Yb)
        with np.errstate(divide="ignore", invalid="ignore"):
            a = np.where(r > 0, np.abs(Xb) / r, 1.0) * dx
            b = np.where(r > 0, np.abs(Yb) / r, 0.0) * dy
        out[rows, cols] = _halfplane_cover(r_eff - r, a, b)
    return out


def _span_indices(starts: np.ndarray, stops: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(row, column) of every pixel in the spans ``starts[k]:stops[k]``; row = k mod n_rows."""
    n_rows = starts.size // 2
    lengths = np.maximum(stops - starts, 0)
    total = int(lengths.sum())
    row_of_span = np.arange(starts.size) % n_rows
    rows = np.repeat(row_of_span, lengths)
    first = np.cumsum(lengths) - lengths
    cols = np.repeat(starts, lengths) + (np.arange(total) - np.repeat(first, lengths))
    return rows, cols


# ------------------------------------------------------------------- polygons


def _polygon_cover(px: np.ndarray, py: np.ndarray, nx: int, ny: int) -> np.ndarray:
    """Exact area of the polygon inside each pixel of an ``ny`` × ``nx`` window.

    Vertices ``px``, ``py`` are in pixel units: pixel ``(j, i)`` is the square
    ``[i, i+1] × [j, j+1]``. Every edge is cut at the integer lines it crosses;
    each piece adds its signed height to the accumulation buffer of its row, split
    between its own pixel and the next by its mean position, and a running sum
    along the row gives the covered area (winding-number form of the area
    integral; common practice, no source). Parts left of the window count as if
    at its left border, so polygons larger than the window stay correct.
    """
    x0, y0 = px, py
    ddx = np.roll(px, -1) - px
    ddy = np.roll(py, -1) - py
    keep = ddy != 0  # horizontal edges add no height
    x0, y0, ddx, ddy = x0[keep], y0[keep], ddx[keep], ddy[keep]
    # Keep the part of each edge inside rows [0, ny].
    ta = (0.0 - y0) / ddy
    tb = (ny - y0) / ddy
    tlo = np.maximum(np.minimum(ta, tb), 0.0)
    thi = np.minimum(np.maximum(ta, tb), 1.0)
    live = tlo < thi
    x0, y0, ddx, ddy, tlo, thi = (v[live] for v in (x0, y0, ddx, ddy, tlo, thi))
    out = np.zeros((ny, nx))
    if x0.size == 0:
        return out

    def crossings(p0, dp, lim):
        pa, pb = p0 + tlo * dp, p0 + thi * dp
        lo = np.maximum(np.ceil(np.minimum(pa, pb)), 0.0)
        hi = np.minimum(np.floor(np.maximum(pa, pb)), lim)
        count = np.where(dp != 0, np.maximum(hi - lo + 1, 0), 0).astype(np.int64)
        edge = np.repeat(np.arange(p0.size), count)
        first = np.cumsum(count) - count
        k = np.repeat(lo, count) + (np.arange(edge.size) - np.repeat(first, count))
        return edge, (k - p0[edge]) / dp[edge]

    ex, tx = crossings(x0, ddx, nx)
    ey, ty = crossings(y0, ddy, ny)
    ends = np.arange(x0.size)
    edge = np.concatenate([ends, ends, ex, ey])
    t = np.concatenate([tlo, thi, tx, ty])
    t = np.clip(t, tlo[edge], thi[edge])
    order = np.lexsort((t, edge))
    edge, t = edge[order], t[order]
    same = edge[:-1] == edge[1:]
    e = edge[:-1][same]
    ta, tb = t[:-1][same], t[1:][same]

    height = (tb - ta) * ddy[e]
    ymid = y0[e] + 0.5 * (ta + tb) * ddy[e]
    xa = np.clip(x0[e] + ta * ddx[e], 0.0, nx)
    xb = np.clip(x0[e] + tb * ddx[e], 0.0, nx)
    xmid = 0.5 * (xa + xb)
    row = np.clip(np.floor(ymid), 0, ny - 1).astype(np.int64)
    col = np.clip(np.floor(xmid), 0, nx).astype(np.int64)
    frac = xmid - col
    stride = nx + 2
    flat = row * stride + col
    size = ny * stride
    acc = np.bincount(flat, weights=height * (1.0 - frac), minlength=size)
    acc += np.bincount(flat + 1, weights=height * frac, minlength=size)
    acc = acc.reshape(ny, stride)[:, :nx]
    np.cumsum(acc, axis=1, out=out)
    np.abs(out, out=out)  # either orientation; self-crossing lobes count once
    # The heights of a row's pieces cancel only to rounding: snap that residue so that
    # pixels off the polygon are exactly 0 (and fully inside exactly 1).
    out[out < _SNAP] = 0.0
    out[out > 1.0 - _SNAP] = 1.0
    return out


def _polygon_blocks(
    verts: np.ndarray, ras: _Raster, win, X: np.ndarray, Y: np.ndarray
) -> Iterator[_Block]:
    """Blocks of an exact polygon; ``verts`` (n, 2) are offsets from the element centre."""
    j0, _, i0, _ = win
    px = (verts[:, 0] - (X[0] - 0.5 * ras.dx)) / ras.dx
    for r0, r1 in _row_blocks(Y.size, X.size):
        py = (verts[:, 1] - (Y[r0] - 0.5 * ras.dy)) / ras.dy
        cov = _polygon_cover(px, py, X.size, r1 - r0)
        yield _Block(slice(j0 + r0, j0 + r1), slice(i0, i0 + X.size), cov, None)


def _rotated(verts: np.ndarray, c: float, s: float) -> np.ndarray:
    return np.column_stack([c * verts[:, 0] - s * verts[:, 1], s * verts[:, 0] + c * verts[:, 1]])


def _box_vertices(half_w: float, half_h: float) -> np.ndarray:
    return np.array([[-half_w, -half_h], [half_w, -half_h], [half_w, half_h], [-half_w, half_h]])


# --------------------------------------------------------------------- images


@functools.lru_cache(maxsize=8)
def _image_up(data: str) -> np.ndarray:
    """Decoded grey levels with row 0 at the BOTTOM (y up), read-only; cached on the data."""
    grey = np.ascontiguousarray(decode_png_data_url(data)[::-1])
    grey.setflags(write=False)
    return grey


def _overlap_matrix(centres: np.ndarray, pitch: float, lo: float, hi: float, cells: int):
    """Sparse (pixels × cells): length of pixel ∩ cell over the pitch; cells split [lo, hi] evenly.

    Exact box-overlap resampling: the merged, sorted breakpoints of both
    partitions cut the line into pieces that each lie in one pixel and one cell.
    """
    n = centres.size
    step = (hi - lo) / cells
    pix_edges = np.append(centres - 0.5 * pitch, centres[-1] + 0.5 * pitch)
    cell_edges = lo + np.arange(cells + 1) * step
    a, b = max(pix_edges[0], lo), min(pix_edges[-1], hi)
    if not a < b:
        return sparse.csr_matrix((n, cells))
    pts = np.concatenate([pix_edges, cell_edges])
    pts = np.unique(np.clip(pts, a, b))
    length = np.diff(pts)
    mid = 0.5 * (pts[:-1] + pts[1:])
    keep = length > 0
    length, mid = length[keep], mid[keep]
    pix = np.clip(np.floor((mid - pix_edges[0]) / pitch), 0, n - 1).astype(np.int64)
    cell = np.clip(np.floor((mid - lo) / step), 0, cells - 1).astype(np.int64)
    return sparse.coo_matrix((length / pitch, (pix, cell)), shape=(n, cells)).tocsr()


def _image_turned(grey_up: np.ndarray, turns: int) -> np.ndarray:
    """The y-up image as laid on the grid after ``turns`` quarter turns counter-clockwise."""
    if turns == 0:
        return grey_up
    if turns == 1:  # grid (X, Y) = (−v, u)
        return grey_up[::-1, :].T
    if turns == 2:  # (X, Y) = (−u, −v)
        return grey_up[::-1, ::-1]
    return grey_up[:, ::-1].T  # (X, Y) = (v, −u)


def _bilinear_grey(grey_up: np.ndarray, u: np.ndarray, v: np.ndarray, w: float, h: float):
    """Bilinear interpolation between image pixel centres, clamped at the border.

    With the border clamped, the integral of the interpolant over the image
    equals the sum of its pixels times the pixel area, so the mean grey level is
    kept (trapezoidal rule on the pixel centres; common practice, no source).
    """
    rows, cols = grey_up.shape
    fu = np.clip((u + 0.5 * w) * (cols / w) - 0.5, 0.0, cols - 1)
    fv = np.clip((v + 0.5 * h) * (rows / h) - 0.5, 0.0, rows - 1)
    k0 = np.minimum(np.floor(fu).astype(np.int64), max(cols - 2, 0))
    l0 = np.minimum(np.floor(fv).astype(np.int64), max(rows - 2, 0))
    k1 = np.minimum(k0 + 1, cols - 1)
    l1 = np.minimum(l0 + 1, rows - 1)
    au = fu - k0
    av = fv - l0
    bottom = grey_up[l0, k0] * (1 - au) + grey_up[l0, k1] * au
    top = grey_up[l1, k0] * (1 - au) + grey_up[l1, k1] * au
    return bottom * (1 - av) + top * av


# -------------------------------------------------------------- element blocks


class _Block(NamedTuple):
    """Part of an element on the grid: coverage on ``t[rows, cols]``.

    ``weighted`` is None for a uniform element; for an image it is the
    pixel-averaged grey level times the footprint, so the painted value is
    ``v · weighted`` in place of ``v · cover``.
    """

    rows: slice
    cols: slice
    cover: np.ndarray
    weighted: np.ndarray | None


Profile = Callable[[np.ndarray, float], np.ndarray]


def _separable_blocks(win, cx: np.ndarray, cy: np.ndarray) -> Iterator[_Block]:
    j0, _, i0, i1 = win
    for r0, r1 in _row_blocks(cy.size, cx.size):
        yield _Block(slice(j0 + r0, j0 + r1), slice(i0, i1), np.outer(cy[r0:r1], cx), None)


def _profiles(turns: int, X, Y, dx, dy, along_u: Profile, along_v: Profile):
    """(cx, cy) of an element whose u axis is grid x (even turns) or grid y (odd)."""
    if turns % 2 == 0:
        return along_u(X, dx), along_v(Y, dy)
    return along_v(X, dx), along_u(Y, dy)


def _rect_blocks(el: Rect, ras, win, X, Y) -> Iterator[_Block]:
    turns = _turns(el.angle)
    hw, hh = 0.5 * el.width, 0.5 * el.height
    if turns is not None:
        cx, cy = _profiles(
            turns,
            X,
            Y,
            ras.dx,
            ras.dy,
            lambda u, p: _slab_1d(u, p, hw),
            lambda v, p: _slab_1d(v, p, hh),
        )
        yield from _separable_blocks(win, cx, cy)
    else:
        verts = _rotated(_box_vertices(hw, hh), *_cos_sin(el.angle))
        yield from _polygon_blocks(verts, ras, win, X, Y)


def _grating_blocks(el: Grating, ras, win, X, Y) -> Iterator[_Block]:
    n, period, opening, hh = int(el.count), el.period, el.width, 0.5 * el.height
    turns = _turns(el.angle)
    if turns is not None:
        cx, cy = _profiles(
            turns,
            X,
            Y,
            ras.dx,
            ras.dy,
            lambda u, p: _comb_1d(u, p, n, period, opening),
            lambda v, p: _slab_1d(v, p, hh),
        )
        yield from _separable_blocks(win, cx, cy)
        return
    c, s = _cos_sin(el.angle)
    ramp_u = abs(c) * ras.dx + abs(s) * ras.dy  # projected pixel across the u normal
    ramp_v = abs(s) * ras.dx + abs(c) * ras.dy
    j0, _, i0, i1 = win
    for r0, r1 in _row_blocks(Y.size, X.size):
        Yb = Y[r0:r1, None]
        u = X[None, :] * c + Yb * s
        v = Yb * c - X[None, :] * s
        cov = _comb_1d(u, ramp_u, n, period, opening)
        cov *= _slab_1d(v, ramp_v, hh)
        yield _Block(slice(j0 + r0, j0 + r1), slice(i0, i1), cov, None)


def _edge_blocks(el: Edge, ras, win, X, Y) -> Iterator[_Block]:
    c, s = _cos_sin(el.angle)
    a, b = abs(c) * ras.dx, abs(s) * ras.dy
    j0, _, i0, i1 = win
    if _turns(el.angle) is not None:
        cx = _halfplane_cover(X * c, a, b) if c else np.ones(X.size)
        cy = _halfplane_cover(Y * s, a, b) if s else np.ones(Y.size)
        yield from _separable_blocks(win, cx, cy)
        return
    for r0, r1 in _row_blocks(Y.size, X.size):
        dist = X[None, :] * c + Y[r0:r1, None] * s
        yield _Block(slice(j0 + r0, j0 + r1), slice(i0, i1), _halfplane_cover(dist, a, b), None)


def _disk_blocks(outer: float, inner: float, ras, win, X, Y) -> Iterator[_Block]:
    j0, _, i0, i1 = win
    dx, dy = ras.dx, ras.dy
    pitch = max(dx, dy)
    factor_in = _disk_supersample(inner, pitch) if inner > 0 else 1
    # A thin ring whose inner circle is supersampled: sample the outer one alike so
    # that outer − inner stays a coverage.
    factor_out = factor_in if factor_in > 1 and outer - inner < 4 * pitch else None
    if inner > 0:
        reach = inner + 2 * pitch
        ia, ib = np.searchsorted(X, [-reach, reach])
    for r0, r1 in _row_blocks(Y.size, X.size):
        Yb = Y[r0:r1]
        cov = _disk_cover(outer, X, Yb, dx, dy, factor_out)
        if inner > 0:
            ja, jb = np.searchsorted(Yb, [-reach, reach])
            if ja < jb and ia < ib:
                hole = _disk_cover(inner, X[ia:ib], Yb[ja:jb], dx, dy, factor_in)
                part = cov[ja:jb, ia:ib]
                part -= hole
                np.clip(part, 0.0, 1.0, out=part)
        yield _Block(slice(j0 + r0, j0 + r1), slice(i0, i1), cov, None)


def _polygon_element_blocks(el: Polygon, ras, win, X, Y) -> Iterator[_Block]:
    verts = _rotated(np.asarray(el.vertices, dtype=np.float64), *_cos_sin(el.angle))
    yield from _polygon_blocks(verts, ras, win, X, Y)


def _image_blocks(el: Image, ras, win, X, Y) -> Iterator[_Block]:
    grey = _image_up(el.data)
    w, h = el.width, el.height
    j0, _, i0, i1 = win
    turns = _turns(el.angle)
    if turns is not None:
        laid = _image_turned(grey, turns)
        ex, ey = (0.5 * w, 0.5 * h) if turns % 2 == 0 else (0.5 * h, 0.5 * w)
        rx = _overlap_matrix(X, ras.dx, -ex, ex, laid.shape[1])
        ry = _overlap_matrix(Y, ras.dy, -ey, ey, laid.shape[0])
        cx = np.asarray(rx.sum(axis=1)).ravel()
        cy = np.asarray(ry.sum(axis=1)).ravel()
        rx_t = rx.T.tocsr()
        for r0, r1 in _row_blocks(Y.size, X.size):
            weighted = np.asarray((ry[r0:r1] @ laid) @ rx_t)
            cov = np.outer(cy[r0:r1], cx)
            yield _Block(slice(j0 + r0, j0 + r1), slice(i0, i1), cov, weighted)
        return
    # Rotated: exact footprint; grey level by bilinear samples on a finer grid.
    c, s = _cos_sin(el.angle)
    image_px = min(w / grey.shape[1], h / grey.shape[0])
    factor = min(_MAX_IMAGE_SUPERSAMPLE, max(1, math.ceil(2 * max(ras.dx, ras.dy) / image_px)))
    # Both the footprint and the grey level are taken on sub-pixels, so that grey
    # levels just outside the footprint do not leak into its border pixels.
    footprint = _rotated(_box_vertices(0.5 * w, 0.5 * h), c, s)
    fdx, fdy = ras.dx / factor, ras.dy / factor
    px = (footprint[:, 0] - (X[0] - 0.5 * ras.dx)) / fdx
    Xs = _subsamples(X, ras.dx, factor)
    for r0, r1 in _row_blocks(Y.size, X.size * factor * factor):
        py = (footprint[:, 1] - (Y[r0] - 0.5 * ras.dy)) / fdy
        rows = r1 - r0
        fine_cov = _polygon_cover(px, py, Xs.size, rows * factor)
        Ys = _subsamples(Y[r0:r1], ras.dy, factor)[:, None]
        u = Xs[None, :] * c + Ys * s
        v = Ys * c - Xs[None, :] * s
        fine = _bilinear_grey(grey, u, v, w, h)
        fine *= fine_cov
        shape = (rows, factor, X.size, factor)
        cov = fine_cov.reshape(shape).mean(axis=(1, 3))
        weighted = fine.reshape(shape).mean(axis=(1, 3))
        yield _Block(slice(j0 + r0, j0 + r1), slice(i0, i1), cov, weighted)


def _require_valid(el: Element) -> None:
    """Refuse an element that breaks its own rules (parameter bounds are param's job)."""
    if not isinstance(el, Element):
        raise ValueError(f"expected an aperture element, got {type(el).__name__!r}")
    problems = el.check()
    if problems:
        key, message = problems[0]
        raise ValueError(f"{el.shape} element, {key}: {message}")


def _blocks(el: Element, ras: _Raster) -> Iterator[_Block]:
    _require_valid(el)
    win = ras.window(_bounds(el))
    j0, j1, i0, i1 = win
    if j0 >= j1 or i0 >= i1:
        return
    X = ras.x[i0:i1] - el.x
    Y = ras.y[j0:j1] - el.y
    if isinstance(el, Rect):
        yield from _rect_blocks(el, ras, win, X, Y)
    elif isinstance(el, Grating):
        yield from _grating_blocks(el, ras, win, X, Y)
    elif isinstance(el, Annulus):
        yield from _disk_blocks(0.5 * el.diameter, 0.5 * el.inner_diameter, ras, win, X, Y)
    elif isinstance(el, Circle):
        yield from _disk_blocks(0.5 * el.diameter, 0.0, ras, win, X, Y)
    elif isinstance(el, Edge):
        yield from _edge_blocks(el, ras, win, X, Y)
    elif isinstance(el, Polygon):
        yield from _polygon_element_blocks(el, ras, win, X, Y)
    elif isinstance(el, Image):
        yield from _image_blocks(el, ras, win, X, Y)
    else:
        raise ValueError(f"unknown aperture element {type(el).__name__!r}")


# ------------------------------------------------------------------ public API


def coverage(element: Element, x, y, *, pitch: Sequence[float] | None = None) -> np.ndarray:
    """Fraction of each pixel square covered by ``element``, float64 (ny, nx) in [0, 1].

    Parameters
    ----------
    element
        Any aperture element of :mod:`compute.model`. For an image, the coverage is
        its rectangular footprint (the grey level is applied by :func:`transmittance`).
    x, y
        Uniformly spaced pixel centres, m; pixel ``(j, i)`` is the square of side
        ``dx`` by ``dy`` centred on ``(x[i], y[j])``.
    pitch
        ``(dx, dy)``, m; needed when ``x`` or ``y`` has a single sample, otherwise
        it must agree with their spacing.

    Raises
    ------
    ValueError
        For axes that are not uniform 1-D arrays, or an element that breaks its own
        rules (``element.check()``); :class:`compute.pngdata.PngDataError` (a
        ValueError) for an image whose data is no usable PNG.
    """
    ras = _raster(x, y, pitch)
    out = np.zeros(ras.shape)
    for blk in _blocks(element, ras):
        out[blk.rows, blk.cols] = blk.cover
    return out


def transmittance(
    aperture: Aperture, x, y, *, pitch: Sequence[float] | None = None, dtype=np.complex128
) -> np.ndarray:
    """Complex amplitude transmittance of ``aperture`` at the pixel centres, (ny, nx).

    The background (0 for 'opaque', 1 for 'clear') is painted over by each element
    in list order, ``t <- t·(1 − c) + c·v`` with ``v = transmission·exp(i·phase)``
    and ``c`` the element's :func:`coverage`; an image paints
    ``v · (grey level averaged over the pixel, times its footprint)`` in place of
    ``c·v``. Arguments and errors as :func:`coverage`; ``dtype`` is a complex type.
    """
    dtype = np.dtype(dtype)
    if dtype.kind != "c":
        raise ValueError(f"dtype must be a complex type, got {dtype}")
    ras = _raster(x, y, pitch)
    background = 1.0 if aperture.background == "clear" else 0.0
    t = np.full(ras.shape, background, dtype=dtype) if background else np.zeros(ras.shape, dtype)
    for n, el in enumerate(aperture.elements):
        value = complex(el.transmission * cmath.exp(1j * el.phase))
        for blk in _blocks(el, ras):
            sub = t[blk.rows, blk.cols]
            if n == 0:  # still the uniform background: one pass, no temporaries
                if blk.weighted is None:
                    np.multiply(blk.cover, value - background, out=sub)
                    sub += background
                else:
                    np.multiply(blk.weighted, value, out=sub)
                    if background:
                        sub += background * (1.0 - blk.cover)
            elif blk.weighted is None:
                step = np.subtract(value, sub)
                step *= blk.cover
                sub += step
            else:
                sub *= 1.0 - blk.cover
                sub += value * blk.weighted
    return t


def element_bounds(element: Element) -> Bounds:
    """``(x0, x1, y0, y1)`` of the region where ``element`` can paint, m; ±inf when unbounded.

    These are the geometric bounds, rotation included. The coverage of a rotated
    grating (a box-filtered ramp) can reach less than one pixel beyond them; the
    rasterisers evaluate one spare pixel around the bounds for that reason.
    """
    _require_valid(element)
    return _bounds(element)


def _bounds(el: Element) -> Bounds:
    c, s = _cos_sin(el.angle)
    if isinstance(el, Edge):
        inf = math.inf
        if s == 0.0:
            return (el.x, inf, -inf, inf) if c > 0 else (-inf, el.x, -inf, inf)
        if c == 0.0:
            return (-inf, inf, el.y, inf) if s > 0 else (-inf, inf, -inf, el.y)
        return (-inf, inf, -inf, inf)
    if isinstance(el, (Circle, Annulus)):
        r = 0.5 * el.diameter
        return (el.x - r, el.x + r, el.y - r, el.y + r)
    if isinstance(el, Polygon):
        v = _rotated(np.asarray(el.vertices, dtype=np.float64), c, s)
        return (
            el.x + float(v[:, 0].min()),
            el.x + float(v[:, 0].max()),
            el.y + float(v[:, 1].min()),
            el.y + float(v[:, 1].max()),
        )
    if isinstance(el, Grating):
        hw, hh = 0.5 * ((el.count - 1) * el.period + el.width), 0.5 * el.height
    elif isinstance(el, (Rect, Image)):
        hw, hh = 0.5 * el.width, 0.5 * el.height
    else:
        raise ValueError(f"unknown aperture element {type(el).__name__!r}")
    ex = abs(c) * hw + abs(s) * hh
    ey = abs(s) * hw + abs(c) * hh
    return (el.x - ex, el.x + ex, el.y - ey, el.y + ey)


def aperture_bounds(aperture: Aperture) -> Bounds | None:
    """Bounding box of the region where the transmittance can differ from the background.

    The union of all element bounds (conservative for both backgrounds); None
    without elements. May hold ±inf (an edge).
    """
    boxes = [element_bounds(el) for el in aperture.elements]
    if not boxes:
        return None
    return (
        min(b[0] for b in boxes),
        max(b[1] for b in boxes),
        min(b[2] for b in boxes),
        max(b[3] for b in boxes),
    )


def _polygon_feature(verts: np.ndarray) -> float:
    """Shortest edge, or shortest distance from a vertex to an edge not touching it.

    The second term catches slivers and narrow gaps that have long edges.
    """
    a = verts
    b = np.roll(verts, -1, axis=0)
    seg = b - a
    lengths = np.hypot(seg[:, 0], seg[:, 1])
    candidates = [lengths[lengths > 0]]
    n = len(verts)
    if n >= 3:
        rel = verts[:, None, :] - a[None, :, :]  # (vertex, edge, 2)
        len2 = np.where(lengths > 0, lengths**2, 1.0)
        t = np.clip(np.einsum("vek,ek->ve", rel, seg) / len2, 0.0, 1.0)
        closest = rel - t[..., None] * seg[None, :, :]
        dist = np.hypot(closest[..., 0], closest[..., 1])
        idx = np.arange(n)
        dist[idx, idx] = np.inf  # edge starting at the vertex
        dist[idx, (idx - 1) % n] = np.inf  # edge ending at it
        candidates.append(dist[dist > 0])
    values = np.concatenate(candidates)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return math.sqrt(abs(_shoelace(verts)))
    return float(values.min())


def _shoelace(verts: np.ndarray) -> float:
    x, y = verts[:, 0], verts[:, 1]
    return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))


def feature_size(element: Element) -> float:
    """The smallest length of ``element`` that a grid must resolve, m (inf for an edge).

    rect: the shorter side; circle: the diameter; annulus: the ring width, or the
    hole when smaller; grating: the opening, the gap between openings (with two
    or more) and the height; polygon: the shortest edge or vertex-to-edge
    distance; image: its pixel size.
    """
    el = element
    _require_valid(el)
    if isinstance(el, Edge):
        return math.inf
    if isinstance(el, Rect):
        return min(el.width, el.height)
    if isinstance(el, Annulus):
        ring = 0.5 * (el.diameter - el.inner_diameter)
        return min(ring, el.inner_diameter) if el.inner_diameter > 0 else ring
    if isinstance(el, Circle):
        return el.diameter
    if isinstance(el, Grating):
        sizes = [el.width, el.height]
        if el.count > 1 and el.period > el.width:
            sizes.append(el.period - el.width)
        return min(sizes)
    if isinstance(el, Polygon):
        return _polygon_feature(np.asarray(el.vertices, dtype=np.float64))
    if isinstance(el, Image):
        rows, cols = _image_up(el.data).shape
        return min(el.width / cols, el.height / rows)
    raise ValueError(f"unknown aperture element {type(el).__name__!r}")


def smallest_feature(aperture: Aperture) -> float:
    """The smallest :func:`feature_size` over the elements, m (inf without elements)."""
    return min((feature_size(el) for el in aperture.elements), default=math.inf)


def area(element: Element) -> float:
    """Geometric area of the element's opening, m² (inf for an edge).

    For an image this is its footprint, ``width·height``; the polygon area is the
    shoelace formula (Gauss's area formula, standard geometry).
    """
    el = element
    _require_valid(el)
    if isinstance(el, Edge):
        return math.inf
    if isinstance(el, (Rect, Image)):
        return el.width * el.height
    if isinstance(el, Annulus):
        return 0.25 * math.pi * (el.diameter**2 - el.inner_diameter**2)
    if isinstance(el, Circle):
        return 0.25 * math.pi * el.diameter**2
    if isinstance(el, Grating):
        return el.count * el.width * el.height
    if isinstance(el, Polygon):
        return abs(_shoelace(np.asarray(el.vertices, dtype=np.float64)))
    raise ValueError(f"unknown aperture element {type(el).__name__!r}")
