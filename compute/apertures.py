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

For the propagation sums, :func:`quadrature_transmittance` gives weights that
integrate smooth kernels to O(h⁴) (exact moments of each pixel's covered part,
summed by parts onto the weights), and :func:`power_transmittance` the
area-weighted ``|t|²`` for the power through the aperture.
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
from scipy.spatial import cKDTree

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
    "power_transmittance",
    "quadrature_transmittance",
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


class _Pieces(NamedTuple):
    """Polygon edges cut at the integer grid lines: each piece lies in one pixel.

    Coordinates are in pixel units of the window (pixel ``(j, i)`` is the square
    ``[i, i+1] × [j, j+1]``); ``x`` is clipped to ``[0, nx]``, so parts left of the
    window lie on its left border. ``height`` is the signed rise of the piece.
    """

    row: np.ndarray
    col: np.ndarray
    xa: np.ndarray
    xb: np.ndarray
    ya: np.ndarray
    yb: np.ndarray
    height: np.ndarray


def _edge_pieces(
    x0: np.ndarray, y0: np.ndarray, x1: np.ndarray, y1: np.ndarray, nx: int, ny: int
) -> _Pieces:
    """Cut the directed edges ``(x0, y0) → (x1, y1)`` at the lines of an ``ny`` × ``nx`` window."""
    ddx = x1 - x0
    ddy = y1 - y0
    keep = ddy != 0  # horizontal edges add no height
    x0, y0, ddx, ddy = x0[keep], y0[keep], ddx[keep], ddy[keep]
    # Keep the part of each edge inside rows [0, ny].
    ta = (0.0 - y0) / ddy
    tb = (ny - y0) / ddy
    tlo = np.maximum(np.minimum(ta, tb), 0.0)
    thi = np.minimum(np.maximum(ta, tb), 1.0)
    live = tlo < thi
    x0, y0, ddx, ddy, tlo, thi = (v[live] for v in (x0, y0, ddx, ddy, tlo, thi))
    if x0.size == 0:
        empty = np.zeros(0)
        return _Pieces(empty.astype(np.int64), empty.astype(np.int64), *(empty,) * 5)

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
    ya = y0[e] + ta * ddy[e]
    yb = y0[e] + tb * ddy[e]
    ymid = 0.5 * (ya + yb)
    xa = np.clip(x0[e] + ta * ddx[e], 0.0, nx)
    xb = np.clip(x0[e] + tb * ddx[e], 0.0, nx)
    xmid = 0.5 * (xa + xb)
    row = np.clip(np.floor(ymid), 0, ny - 1).astype(np.int64)
    col = np.clip(np.floor(xmid), 0, nx).astype(np.int64)
    return _Pieces(row, col, xa, xb, ya, yb, height)


def _cover_from_pieces(p: _Pieces, nx: int, ny: int) -> np.ndarray:
    """Exact covered fraction of every pixel from the pieces of the polygon's edges.

    Each piece adds its signed height to the accumulation buffer of its row, split
    between its own pixel and the next by its mean position, and a running sum
    along the row gives the covered area (winding-number form of the area
    integral; common practice, no source).
    """
    out = np.zeros((ny, nx))
    if p.row.size == 0:
        return out
    xmid = 0.5 * (p.xa + p.xb)
    frac = xmid - p.col
    stride = nx + 2
    flat = p.row * stride + p.col
    size = ny * stride
    acc = np.bincount(flat, weights=p.height * (1.0 - frac), minlength=size)
    acc += np.bincount(flat + 1, weights=p.height * frac, minlength=size)
    acc = acc.reshape(ny, stride)[:, :nx]
    np.cumsum(acc, axis=1, out=out)
    np.abs(out, out=out)  # either orientation; self-crossing lobes count once
    # The heights of a row's pieces cancel only to rounding: snap that residue so that
    # pixels off the polygon are exactly 0 (and fully inside exactly 1).
    out[out < _SNAP] = 0.0
    out[out > 1.0 - _SNAP] = 1.0
    return out


def _polygon_cover(px: np.ndarray, py: np.ndarray, nx: int, ny: int) -> np.ndarray:
    """Exact area of the polygon inside each pixel of an ``ny`` × ``nx`` window.

    Vertices ``px``, ``py`` are in pixel units: pixel ``(j, i)`` is the square
    ``[i, i+1] × [j, j+1]``. Every edge is cut at the integer lines it crosses
    (:func:`_edge_pieces`) and the pieces are accumulated along the rows
    (:func:`_cover_from_pieces`). Parts left of the window count as if at its left
    border, so polygons larger than the window stay correct.
    """
    pieces = _edge_pieces(px, py, np.roll(px, -1), np.roll(py, -1), nx, ny)
    return _cover_from_pieces(pieces, nx, ny)


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
    return _overlap_moment_matrices(centres, pitch, lo, hi, cells, orders=1)[0]


def _overlap_moment_matrices(
    centres: np.ndarray, pitch: float, lo: float, hi: float, cells: int, orders: int = 3
) -> list[sparse.csr_matrix]:
    """``[∫ u^k du over pixel ∩ cell for k < orders]``, u = (x − pixel centre)/pitch.

    ``k = 0`` is the overlap matrix of :func:`_overlap_matrix`; ``k = 1, 2`` are the
    first and second moments of each overlap about its pixel centre.
    """
    n = centres.size
    step = (hi - lo) / cells
    pix_edges = np.append(centres - 0.5 * pitch, centres[-1] + 0.5 * pitch)
    cell_edges = lo + np.arange(cells + 1) * step
    a, b = max(pix_edges[0], lo), min(pix_edges[-1], hi)
    if not a < b:
        return [sparse.csr_matrix((n, cells)) for _ in range(orders)]
    pts = np.concatenate([pix_edges, cell_edges])
    pts = np.unique(np.clip(pts, a, b))
    length = np.diff(pts)
    mid = 0.5 * (pts[:-1] + pts[1:])
    keep = length > 0
    left, right, mid = pts[:-1][keep], pts[1:][keep], mid[keep]
    pix = np.clip(np.floor((mid - pix_edges[0]) / pitch), 0, n - 1).astype(np.int64)
    cell = np.clip(np.floor((mid - lo) / step), 0, cells - 1).astype(np.int64)
    ua = (left - centres[pix]) / pitch
    ub = (right - centres[pix]) / pitch
    values = [(right - left) / pitch, 0.5 * (ub * ub - ua * ua), (ub**3 - ua**3) / 3.0]
    return [
        sparse.coo_matrix((values[k], (pix, cell)), shape=(n, cells)).tocsr() for k in range(orders)
    ]


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


def _image_blocks(el: Image, ras, win, X, Y, *, squared: bool = False) -> Iterator[_Block]:
    """Blocks of an image; with ``squared``, ``weighted`` holds the squared grey level."""
    grey = _image_up(el.data)
    if squared:
        grey = grey * grey
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


# ------------------------------------------------------------ quadrature weights
#
# The propagators sum T_i g(s_i) h_x h_y over pixel centres. Per pixel, with u, v
# the offsets from the centre in pixel units, ∫_pixel t g = h_x h_y Σ F_pq ∂^p_x ∂^q_y g
# (h_x^p h_y^q) / (p! q!) over the moments F_pq = ∫_covered u^p v^q du dv. Central
# differences replace the derivatives, and summing by parts moves them onto the
# moments: a pixel's weight gathers Op_p^x Op_q^y F_pq from its 3 × 3 neighbourhood,
# Op_0 = 1, Op_1 the adjoint of the central difference, (f_{k−1} − f_{k+1})/2, and
# Op_2 half the second difference. A full pixel has F_00 = 1, F_20 = F_02 = 1/12,
# F_22 = 1/144 and no odd moments.
#
# The moments are split into those of the coverage spread uniformly over each
# pixel (whose weights are the [1, 22, 1]/24 filter along each axis, applied to C)
# and deviations, which only pixels cut by an edge have; those are kept as sparse
# records. Separable shapes (axis-aligned rects, gratings, edges, right-angle
# images) keep all nine orders, the tensor product of the 1-D rules; the others
# the six orders up to second, the rest taken as uniform.

_ORDERS_2D = ((0, 0), (1, 0), (0, 1), (2, 0), (0, 2), (1, 1))
# Separable shapes keep the whole tensor product of the 1-D rules.
_ORDERS_PRODUCT = (*_ORDERS_2D, (1, 2), (2, 1), (2, 2))
# Gauss–Legendre in the angle along arcs (integrands: trigonometric polynomials of
# degree ≤ 4): 10 nodes hold 1e-14 over a quarter turn, 5 over arcs up to 0.1 rad.
_GAUSS_ARC = np.polynomial.legendre.leggauss(10)
_GAUSS_SHORT_ARC = np.polynomial.legendre.leggauss(5)
_SHORT_ARC = 0.1  # rad
# Orders of the deviations from a uniformly spread coverage, as stored and scattered.
_DEV_ORDERS = ((1, 0), (0, 1), (2, 0), (0, 2), (1, 1), (1, 2), (2, 1), (2, 2))
# Op_k as taps {offset: weight} of the scatter: 1, the adjoint central difference, ½Δ.
_OP_TAPS = ({0: 1.0}, {1: 0.5, -1: -0.5}, {1: 0.5, -1: 0.5, 0: -1.0})
_GAUSS2 = (0.5 - 0.5 / math.sqrt(3.0), 0.5 + 0.5 / math.sqrt(3.0))  # 2-point rule on [0, 1]
_MAX_PIECES = 40_000_000  # visible edge pieces of a rotated grating beyond which it falls back
_PIECE_COST = 24  # work-block samples charged per edge piece
_DEV_TOL = 1e-15  # moments this close to those of a uniform pixel count as uniform


def _interval_moments(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """``(3, n)``: ``∫ u^k du``, k = 0, 1, 2, over ``[lo, hi] ∩ [−½, ½]`` (pixel units)."""
    a = np.clip(lo, -0.5, 0.5)
    b = np.maximum(np.clip(hi, -0.5, 0.5), a)
    return np.stack([b - a, 0.5 * (b * b - a * a), (b**3 - a**3) / 3.0])


def _slab_moments(u: np.ndarray, pitch: float, half: float) -> np.ndarray:
    """Moments of ``[−half, half]`` in the pixels centred on ``u`` (m)."""
    return _interval_moments((-half - u) / pitch, (half - u) / pitch)


def _halfline_moments(u: np.ndarray, pitch: float, direction: float) -> np.ndarray:
    """Moments of ``{direction · u ≥ 0}`` (direction ±1) or of the whole line (0)."""
    n = u.size
    if direction == 0:
        return _interval_moments(np.full(n, -np.inf), np.full(n, np.inf))
    if direction > 0:
        return _interval_moments(-u / pitch, np.full(n, np.inf))
    return _interval_moments(np.full(n, -np.inf), -u / pitch)


def _comb_moments(u: np.ndarray, pitch: float, count: int, period: float, opening: float):
    """Moments of ``count`` openings centred on 0 in the pixels centred on ``u`` (m).

    A pixel meets at most two openings partly (the ones holding its ends); the
    openings in between are whole, and their moments about the pixel centre are
    sums over an arithmetic progression in closed form, so any count costs the same.
    """
    left = -0.5 * ((count - 1) * period + opening)
    rel = u - left  # pixel centres from the left end of the first opening
    a, b = rel - 0.5 * pitch, rel + 0.5 * pitch
    ka, kb = np.floor(a / period), np.floor(b / period)
    out = np.zeros((3, u.size))
    last = count - 1

    def partial(k, z0, z1, ok):
        lo = np.where(ok, (z0 - rel) / pitch, 0.0)
        hi = np.where(ok, (z1 - rel) / pitch, 0.0)
        return _interval_moments(lo, hi)

    out += partial(ka, np.maximum(a, ka * period), ka * period + opening, (ka >= 0) & (ka <= last))
    ok_b = (kb > ka) & (kb >= 0) & (kb <= last)
    out += partial(kb, kb * period, kb * period + opening, ok_b)
    m0 = np.maximum(ka + 1, 0)
    m1 = np.minimum(kb - 1, last)
    n = np.maximum(m1 - m0 + 1, 0)
    w, p = opening / pitch, period / pitch
    mean = (0.5 * (m0 + m1) * period + 0.5 * opening - rel) / pitch  # mean opening centre
    out[0] += n * w
    out[1] += n * w * mean
    out[2] += w * (n * mean * mean + p * p * n * (n * n - 1) / 12.0) + n * w**3 / 12.0
    return out


# ----------------------------------------------------- exact disk ∩ pixel moments


def _disk_square_moments(px, py, hx: float, hy: float, radius: float) -> np.ndarray:
    """``(6, n)``: ∫∫ u^a v^b over the disk ∩ pixel, (a, b) in :data:`_ORDERS_2D`, in m^(2+a+b).

    The disk of ``radius`` is centred on the origin; the pixels are
    ``[px ± hx] × [py ± hy]`` and ``u = x − px``, ``v = y − py``. Green's theorem
    turns each moment into ``∮ u^(a+1) v^b / (a+1) dv`` around the boundary of the
    intersection: the parts of the two vertical pixel sides inside the disk (closed
    form) and the arcs of the circle inside the pixel (Gauss–Legendre in the
    angle, integrand a trigonometric polynomial of degree ≤ 4). Everything is
    evaluated in coordinates about the pixel centre, so nothing cancels.
    """
    n = px.size
    out = np.zeros((6, n))
    r = radius
    for side in (1.0, -1.0):  # right side upwards, left side downwards
        xs = px + side * hx
        w = np.sqrt(np.clip((r - xs) * (r + xs), 0.0, None))
        v0 = np.clip(-w - py, -hy, hy)
        v1 = np.maximum(np.clip(w - py, -hy, hy), v0)
        u = side * hx
        for k, (a, b) in enumerate(_ORDERS_2D):
            out[k] += side * u ** (a + 1) / (a + 1) * (v1 ** (b + 1) - v0 ** (b + 1)) / (b + 1)
    # Angles where the circle crosses the pixel's four lines, and quarter turns so that
    # no arc spans more than π/2.
    cand = np.full((n, 13), math.pi)
    cand[:, :5] = (-math.pi, -0.5 * math.pi, 0.0, 0.5 * math.pi, math.pi)
    for k, xs in enumerate((px - hx, px + hx)):
        ok = np.abs(xs) < r
        ys = np.sqrt(np.clip((r - xs) * (r + xs), 0.0, None))
        cand[ok, 5 + 2 * k] = np.arctan2(ys, xs)[ok]
        cand[ok, 6 + 2 * k] = np.arctan2(-ys, xs)[ok]
    for k, ys in enumerate((py - hy, py + hy)):
        ok = np.abs(ys) < r
        xs = np.sqrt(np.clip((r - ys) * (r + ys), 0.0, None))
        cand[ok, 9 + 2 * k] = np.arctan2(ys, xs)[ok]
        cand[ok, 10 + 2 * k] = np.arctan2(ys, -xs)[ok]
    cand.sort(axis=1)
    ta, tb = cand[:, :-1], cand[:, 1:]
    tm = 0.5 * (ta + tb)
    live = (
        (tb > ta)
        & (np.abs(r * np.cos(tm) - px[:, None]) < hx)
        # the arc between two crossings is wholly in or out: test its midpoint
        & (np.abs(r * np.sin(tm) - py[:, None]) < hy)
    )
    pix, seg = np.nonzero(live)
    span = tb[pix, seg] - ta[pix, seg]
    short = span <= _SHORT_ARC
    for group, (nodes, weights) in ((short, _GAUSS_SHORT_ARC), (~short, _GAUSS_ARC)):
        if not np.any(group):
            continue
        gp = pix[group]
        half = 0.5 * span[group]
        theta = tm[gp, seg[group]][:, None] + half[:, None] * nodes[None, :]
        cos, sin = np.cos(theta), np.sin(theta)
        u = r * cos - px[gp][:, None]
        v = r * sin - py[gp][:, None]
        dv = (half[:, None] * weights[None, :]) * (r * cos)
        for k, (a, b) in enumerate(_ORDERS_2D):
            vals = np.sum(u ** (a + 1) * v**b * dv, axis=1) / (a + 1)
            out[k] += np.bincount(gp, weights=vals, minlength=n)
    return out


def _moment_scale(dx: float, dy: float) -> np.ndarray:
    """Divisors turning the moments of :data:`_ORDERS_2D` in metres into pixel units."""
    return np.array([dx**a * dy**b * dx * dy for a, b in _ORDERS_2D])


def _deviations(mom: np.ndarray) -> np.ndarray:
    """``(5, n)``: the moments minus those of the covered fraction spread uniformly.

    ``(M_x, M_y, S_xx − C/12, S_yy − C/12, S_xy)`` from the six pixel-unit moments
    ``(C, M_x, M_y, S_xx, S_yy, S_xy)``; zero on fully covered and empty pixels.
    """
    c = mom[0]
    return np.stack([mom[1], mom[2], mom[3] - c / 12.0, mom[4] - c / 12.0, mom[5]])


def _disk_band(radius: float, X: np.ndarray, Y: np.ndarray, dx: float, dy: float):
    """Interior spans and exact moments on the pixels that the circle passes through.

    Returns ``(fill_lo, fill_hi)`` per row (columns wholly inside the disk) and
    ``(rows, cols, moments)`` of the boundary pixels, moments ``(6, n)`` in pixel
    units (one pixel of slack each side of the band: exact values there anyway).
    """
    nx = X.size
    hx, hy = 0.5 * dx, 0.5 * dy
    ay = np.abs(Y)
    ymin = np.maximum(ay - hy, 0.0)
    ymax = ay + hy
    r2 = radius * radius
    touch = ymin < radius
    wo = np.sqrt(np.clip(r2 - ymin * ymin, 0.0, None))
    wi = np.sqrt(np.clip(r2 - ymax * ymax, 0.0, None))
    has_inner = (ymax < radius) & (wi > hx)
    t_lo = np.searchsorted(X, -wo - hx, "right") - 1
    t_hi = np.searchsorted(X, wo + hx, "left") + 1
    f_lo = np.searchsorted(X, -(wi - hx), "left") + 1
    f_hi = np.searchsorted(X, wi - hx, "right") - 1
    t_lo, t_hi = np.clip(t_lo, 0, nx), np.clip(t_hi, 0, nx)
    t_lo[~touch] = 0
    t_hi[~touch] = 0
    empty = ~has_inner | (f_lo >= f_hi) | ~touch
    f_lo[empty] = t_hi[empty]
    f_hi[empty] = t_hi[empty]
    f_lo = np.clip(f_lo, t_lo, t_hi)
    f_hi = np.clip(f_hi, f_lo, t_hi)
    rows, cols = _span_indices(np.concatenate([t_lo, f_hi]), np.concatenate([f_lo, t_hi]))
    order = np.lexsort((cols, rows))  # row-major, so that row blocks are slices
    rows, cols = rows[order], cols[order]
    mom = np.zeros((6, rows.size))
    scale = _moment_scale(dx, dy)[:, None]
    chunk = 8192
    for k0 in range(0, rows.size, chunk):
        sl = slice(k0, k0 + chunk)
        mom[:, sl] = _disk_square_moments(X[cols[sl]], Y[rows[sl]], hx, hy, radius) / scale
    # Pixels of the slack that are full or empty to rounding: exactly so.
    full, empty = mom[0] > 1.0 - _SNAP, mom[0] < _SNAP
    mom[:, empty] = 0.0
    mom[:, full] = np.array([1.0, 0.0, 0.0, 1.0 / 12.0, 1.0 / 12.0, 0.0])[:, None]
    return (f_lo, f_hi), (rows, cols, mom)


# ------------------------------------------------------ exact polygon ∩ pixel moments


def _piece_records(p: _Pieces, nx: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pixels crossed by the polygon's boundary and the deviations of their moments.

    Extends the accumulation of :func:`_cover_from_pieces` to all moments up to
    second order: a piece adds the moments of the trapezoid between itself and
    its pixel's right side to that pixel, and the moments of a full-width strip of
    its height to every pixel right of it in its row. Both are polynomials of
    degree ≤ 3 along the piece, integrated exactly by the 2-point Gauss rule. The
    strips are summed sparsely: the pixels that hold pieces are returned, and the
    runs between them that the strips leave partly covered (along exactly
    horizontal edges); every other pixel is empty or full. Returns
    ``(rows, cols, deviations (5, n))``
    (see :func:`_deviations`), local to the window.
    """
    inside = p.col < nx
    if not np.any(inside):
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros((5, 0))
    row, col = p.row[inside], p.col[inside]
    ua = p.xa[inside] - col - 0.5
    ub = p.xb[inside] - col - 0.5
    va = p.ya[inside] - row - 0.5
    vb = p.yb[inside] - row - 0.5
    h = p.height[inside]
    own = np.zeros((6, row.size))
    strip = np.zeros((3, row.size))
    for t in _GAUSS2:
        u = ua + t * (ub - ua)
        v = va + t * (vb - va)
        hw = 0.5 * h
        for k, (a, b) in enumerate(_ORDERS_2D):
            own[k] += hw * v**b * (0.5 ** (a + 1) - u ** (a + 1)) / (a + 1)
        strip[0] += hw
        strip[1] += hw * v
        strip[2] += hw * v * v
    key = row * nx + col
    order = np.argsort(key, kind="stable")
    key = key[order]
    keys, start = np.unique(key, return_index=True)
    own = np.add.reduceat(own[:, order], start, axis=1)
    strip = np.add.reduceat(strip[:, order], start, axis=1)
    krow = keys // nx
    base = np.cumsum(strip, axis=1) - strip  # strips of all earlier pixels
    first = np.searchsorted(krow, krow, "left")  # first pixel of the same row
    left = base - base[:, first]  # strips of the pixels left of this one in its row
    mom = own
    mom[0] += left[0]
    mom[2] += left[1]
    mom[3] += left[0] / 12.0
    mom[4] += left[2]
    mom *= np.sign(mom[0])  # either orientation, as the coverage
    kcol = keys % nx
    # Pixels between two pieces of a row (along an exactly horizontal edge) hold the
    # strips alone: C = Σh, M_y = Σ∫v, S_yy = Σ∫v², S_xx = C/12, no odd x moments.
    after = left + strip
    nxt = np.append(kcol[1:], nx)
    nxt[np.append(krow[1:] != krow[:-1], True)] = nx  # a row's last pixel runs to the end
    gap = nxt - kcol - 1
    c_after = np.abs(after[0])
    sign = np.sign(after[0])
    live = (
        (gap > 0)
        & (c_after > _SNAP)
        & (c_after < 1.0 - _SNAP)
        & ((np.abs(after[1]) > _DEV_TOL) | (np.abs(after[2] - after[0] / 12.0) > _DEV_TOL))
    )
    g = np.flatnonzero(live)
    g_len = gap[g]
    g_src = np.repeat(g, g_len)
    g_col = np.repeat(kcol[g] + 1, g_len) + (
        np.arange(g_len.sum()) - np.repeat(np.cumsum(g_len) - g_len, g_len)
    )
    zero = np.zeros(g_src.size)
    g_dev = np.stack(
        [
            zero,
            sign[g_src] * after[1, g_src],
            zero,
            sign[g_src] * (after[2, g_src] - after[0, g_src] / 12.0),
            zero,
        ]
    )
    dev = _deviations(mom)
    keep = (mom[0] > _SNAP) & (mom[0] < 1.0 - _SNAP) & (np.abs(dev).max(axis=0) > _DEV_TOL)
    rows = np.concatenate([krow[keep], krow[g_src]])
    cols = np.concatenate([kcol[keep], g_col])
    dev = np.concatenate([dev[:, keep], g_dev], axis=1)
    order = np.lexsort((cols, rows))  # row-major, each pixel once
    return rows[order], cols[order], dev[:, order]


# ------------------------------------------------------------------ element parts


@dataclass(frozen=True)
class _SeparablePart:
    """An element whose moments are products of 1-D moments: ``F_pq = fy[q] ⊗ fx[p]``."""

    rows: slice
    cols: slice
    fx: np.ndarray  # (3, ncols): ∫ u^k du per column
    fy: np.ndarray  # (3, nrows)


@dataclass(frozen=True)
class _DensePart:
    """An image at a right angle: grey-weighted moments ``G`` and footprint moments ``F``.

    Both map ``(p, q)`` of :data:`_ORDERS_PRODUCT` to (nrows, ncols) arrays.
    """

    rows: slice
    cols: slice
    F: dict[tuple[int, int], np.ndarray]
    G: dict[tuple[int, int], np.ndarray]


@dataclass(frozen=True)
class _SparsePart:
    """Exact coverage on a block plus moment deviations on its boundary pixels.

    ``rec_j``, ``rec_i`` are raster indices (each pixel once); ``dev`` is (5, n), see
    :func:`_deviations`. ``weighted`` is an image's pixel-averaged grey level times
    its footprint, or None for a uniform element.
    """

    rows: slice
    cols: slice
    cover: np.ndarray
    weighted: np.ndarray | None
    rec_j: np.ndarray
    rec_i: np.ndarray
    dev: np.ndarray
    # When set, the coverage is 0 or 1 around each pixel off the listed ones, so the
    # second differences of the uniform filter need only these raster pixels
    # ``(j, i, c)``, ``c`` (9, n) the coverage at its 3 × 3 neighbours in the order of
    # _NEIGHBOURS (the first part of the element holds them, the others empty ones).
    local: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None


_Part = _SeparablePart | _DensePart | _SparsePart


def _separable_part(el: Element, ras: _Raster, win, X, Y) -> _SeparablePart:
    j0, j1, i0, i1 = win
    turns = _turns(el.angle)
    even = turns % 2 == 0
    dx, dy = ras.dx, ras.dy
    if isinstance(el, Rect):
        hx, hy = (0.5 * el.width, 0.5 * el.height) if even else (0.5 * el.height, 0.5 * el.width)
        fx, fy = _slab_moments(X, dx, hx), _slab_moments(Y, dy, hy)
    elif isinstance(el, Grating):
        n, period, opening, hh = int(el.count), el.period, el.width, 0.5 * el.height
        if even:
            fx, fy = _comb_moments(X, dx, n, period, opening), _slab_moments(Y, dy, hh)
        else:
            fx, fy = _slab_moments(X, dx, hh), _comb_moments(Y, dy, n, period, opening)
    else:  # an edge along an axis: the half-plane c·X + s·Y ≥ 0
        c, s = _cos_sin(el.angle)
        fx, fy = _halfline_moments(X, dx, c), _halfline_moments(Y, dy, s)
    return _SeparablePart(slice(j0, j1), slice(i0, i1), fx, fy)


def _image_dense_parts(el: Image, ras: _Raster, win, X, Y) -> Iterator[_DensePart]:
    grey = _image_up(el.data)
    turns = _turns(el.angle)
    laid = _image_turned(grey, turns)
    w, h = el.width, el.height
    ex, ey = (0.5 * w, 0.5 * h) if turns % 2 == 0 else (0.5 * h, 0.5 * w)
    rx = _overlap_moment_matrices(X, ras.dx, -ex, ex, laid.shape[1])
    ry = _overlap_moment_matrices(Y, ras.dy, -ey, ey, laid.shape[0])
    cx = [np.asarray(m.sum(axis=1)).ravel() for m in rx]
    cy = [np.asarray(m.sum(axis=1)).ravel() for m in ry]
    rx_t = [m.T.tocsr() for m in rx]
    j0, _, i0, i1 = win
    for r0, r1 in _row_blocks(Y.size, 9 * X.size):
        along_y = [np.asarray(ry[q][r0:r1] @ laid) for q in range(3)]
        G = {(p, q): np.asarray(along_y[q] @ rx_t[p]) for p, q in _ORDERS_PRODUCT}
        F = {(p, q): np.outer(cy[q][r0:r1], cx[p]) for p, q in _ORDERS_PRODUCT}
        yield _DensePart(slice(j0 + r0, j0 + r1), slice(i0, i1), F, G)


def _records_by_rows(rec_j, rec_i, dev, r0: int, r1: int):
    """The records (sorted by row) that lie in raster rows ``r0:r1``."""
    a, b = np.searchsorted(rec_j, [r0, r1])
    return rec_j[a:b], rec_i[a:b], dev[:, a:b]


def _disk_parts(outer: float, inner: float, ras: _Raster, win, X, Y) -> Iterator[_SparsePart]:
    j0, _, i0, i1 = win
    nx = X.size
    disks = [(outer, 1.0)] + ([(inner, -1.0)] if inner > 0 else [])
    bands = [(sign, *_disk_band(r, X, Y, ras.dx, ras.dy)) for r, sign in disks]
    keys = np.concatenate([rows * nx + cols for _, _, (rows, cols, _) in bands])
    devs = np.concatenate([sign * _deviations(mom) for sign, _, (_, _, mom) in bands], axis=1)
    if len(bands) == 1:  # one disk: its band is already sorted, each pixel once
        ukeys, dev = keys, devs
    else:
        ukeys, inverse = np.unique(keys, return_inverse=True)
        dev = np.stack([np.bincount(inverse, weights=d, minlength=ukeys.size) for d in devs])
    keep = np.abs(dev).max(axis=0) > _DEV_TOL if dev.size else np.zeros(0, bool)
    rec_j, rec_i, dev = ukeys[keep] // nx + j0, ukeys[keep] % nx + i0, dev[:, keep]
    lj, li, lc = _disk_neighbourhood(bands, ukeys, Y.size, nx)
    local = (lj + j0, li + i0, lc)
    none = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros((9, 0)))
    for r0, r1 in _row_blocks(Y.size, X.size):
        cov = np.zeros((r1 - r0, nx))
        for sign, (f_lo, f_hi), (rows, cols, mom) in bands:
            for j in np.flatnonzero(f_hi[r0:r1] > f_lo[r0:r1]):
                cov[j, f_lo[r0 + j] : f_hi[r0 + j]] += sign
            a, b = np.searchsorted(rows, [r0, r1])
            cov[rows[a:b] - r0, cols[a:b]] += sign * mom[0, a:b]
        np.clip(cov, 0.0, 1.0, out=cov)
        yield _SparsePart(
            slice(j0 + r0, j0 + r1),
            slice(i0, i1),
            cov,
            None,
            *_records_by_rows(rec_j, rec_i, dev, j0 + r0, j0 + r1),
            local=local if r0 == 0 else none,
        )


def _disk_neighbourhood(bands, band_keys: np.ndarray, ny: int, nx: int):
    """The band of a disk or ring and its 8 neighbours, with the coverage around each.

    Off these pixels (and the window's outer ring) every 3 × 3 neighbourhood is
    wholly covered or wholly empty (a full pixel next to an empty one shares a
    side with the circle, so both are on the band). Returns window-local
    ``(j, i, c)``, ``c`` (9, n) the coverage at each pixel's 3 × 3 neighbours (in
    the order of :data:`_NEIGHBOURS`), looked up pointwise: band values, else 1 on
    the interior spans, else 0.
    """
    j, i = band_keys // nx, band_keys % nx
    mark = np.zeros((ny + 2, nx + 2), bool)  # one spare pixel each side of the window
    for oy in (0, 1, 2):
        for ox in (0, 1, 2):
            mark[j + oy, i + ox] = True
    # The window's outer ring too: where the raster cuts the disk, its border pixels
    # are not deep inside (nothing lies beyond them) and need the full weights.
    mark[[1, -2], 1:-1] = True
    mark[1:-1, [1, -2]] = True
    tj, ti = np.nonzero(mark)  # row-major, each once
    tj, ti = tj - 1, ti - 1

    def cover_at(jj, ii):
        inside = (jj >= 0) & (jj < ny) & (ii >= 0) & (ii < nx)
        jc, ic = np.where(inside, jj, 0), np.where(inside, ii, 0)
        q = jc * nx + ic
        total = np.zeros(jj.size)
        for sign, (f_lo, f_hi), (rows, cols, mom) in bands:
            filled = ((f_lo[jc] <= ic) & (ic < f_hi[jc])).astype(float)
            if rows.size:
                keys = rows * nx + cols
                k = np.minimum(np.searchsorted(keys, q), keys.size - 1)
                filled = np.where(keys[k] == q, mom[0, k], filled)
            total += sign * np.where(inside, filled, 0.0)
        return np.clip(total, 0.0, 1.0)

    c = np.stack([cover_at(tj + oy, ti + ox) for oy, ox in _NEIGHBOURS])
    return tj, ti, c


def _polygon_parts(edges: np.ndarray, ras: _Raster, win, X, Y) -> Iterator[_SparsePart]:
    """Exact parts of a polygon given as directed edges ``(4, n)``: x0, y0, x1, y1 (m, about
    the element centre); any number of closed loops of one orientation."""
    j0, _, i0, i1 = win
    ox, oy = X[0] - 0.5 * ras.dx, Y[0] - 0.5 * ras.dy
    ex0, ex1 = (edges[0] - ox) / ras.dx, (edges[2] - ox) / ras.dx
    ey0, ey1 = (edges[1] - oy) / ras.dy, (edges[3] - oy) / ras.dy
    crossings = np.sum(np.abs(ex1 - ex0) + np.abs(ey1 - ey0) + 2.0)
    row_cost = X.size + int(_PIECE_COST * crossings / max(1, Y.size))
    for r0, r1 in _row_blocks(Y.size, row_cost):
        pieces = _edge_pieces(ex0, ey0 - r0, ex1, ey1 - r0, X.size, r1 - r0)
        cov = _cover_from_pieces(pieces, X.size, r1 - r0)
        rows, cols, dev = _piece_records(pieces, X.size)
        yield _SparsePart(
            slice(j0 + r0, j0 + r1), slice(i0, i1), cov, None, rows + j0 + r0, cols + i0, dev
        )


def _ring_edges(verts: np.ndarray) -> np.ndarray:
    nxt = np.roll(verts, -1, axis=0)
    return np.stack([verts[:, 0], verts[:, 1], nxt[:, 0], nxt[:, 1]])


def _grating_edges(el: Grating, X: np.ndarray, Y: np.ndarray, dx: float, dy: float) -> np.ndarray:
    """The openings of a rotated grating that reach the window, as closed loops (4, 4·n).

    A closed loop wholly beside the window adds nothing to any pixel of it (its
    heights cancel row by row), so only the openings whose box meets the window
    are kept: the cost follows what the grid shows, not the count.
    """
    c, s = _cos_sin(el.angle)
    n, period, hw, hh = int(el.count), el.period, 0.5 * el.width, 0.5 * el.height
    centres = (np.arange(n) - 0.5 * (n - 1)) * period
    ex, ey = abs(c) * hw + abs(s) * hh, abs(s) * hw + abs(c) * hh
    cx, cy = c * centres, s * centres
    meets = (
        (cx + ex > X[0] - dx)
        & (cx - ex < X[-1] + dx)
        & (cy + ey > Y[0] - dy)
        & (cy - ey < Y[-1] + dy)
    )
    centres = centres[meets]
    box = _box_vertices(hw, hh)  # counter-clockwise
    vx = centres[:, None] + box[None, :, 0]  # (n, 4)
    vy = np.broadcast_to(box[None, :, 1], vx.shape)
    rx, ry = c * vx - s * vy, s * vx + c * vy
    nx_, ny_ = np.roll(rx, -1, axis=1), np.roll(ry, -1, axis=1)
    return np.stack([rx.ravel(), ry.ravel(), nx_.ravel(), ny_.ravel()])


def _halfplane_polygon(el: Edge, ras: _Raster) -> np.ndarray:
    """The raster plus two pixels each side, clipped to the edge's half-plane (about its centre)."""
    c, s = _cos_sin(el.angle)
    x0 = ras.x[0] - 2.0 * ras.dx - el.x
    x1 = ras.x[-1] + 2.0 * ras.dx - el.x
    y0 = ras.y[0] - 2.0 * ras.dy - el.y
    y1 = ras.y[-1] + 2.0 * ras.dy - el.y
    box = [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]
    kept = []  # Sutherland–Hodgman against one line (common practice, no source)
    for k, p in enumerate(box):
        q = box[(k + 1) % 4]
        dp, dq = p[0] * c + p[1] * s, q[0] * c + q[1] * s
        if dp >= 0:
            kept.append(p)
        if (dp >= 0) != (dq >= 0):
            t = dp / (dp - dq)
            kept.append((p[0] + t * (q[0] - p[0]), p[1] + t * (q[1] - p[1])))
    return np.array(kept, dtype=np.float64).reshape(-1, 2)


def _fallback_parts(blocks: Iterator[_Block]) -> Iterator[_SparsePart]:
    """Parts with the given coverage and the moments of a uniformly spread one."""
    empty = np.zeros(0, np.int64)
    for blk in blocks:
        yield _SparsePart(
            blk.rows, blk.cols, blk.cover, blk.weighted, empty, empty, np.zeros((5, 0))
        )


def _rotated_image_parts(el: Image, ras: _Raster, win, X, Y) -> Iterator[_SparsePart]:
    c, s = _cos_sin(el.angle)
    footprint = _rotated(_box_vertices(0.5 * el.width, 0.5 * el.height), c, s)
    recs = [
        (p.rec_j, p.rec_i, p.dev) for p in _polygon_parts(_ring_edges(footprint), ras, win, X, Y)
    ]
    rec_j = np.concatenate([r[0] for r in recs])
    rec_i = np.concatenate([r[1] for r in recs])
    dev = np.concatenate([r[2] for r in recs], axis=1)
    for blk in _image_blocks(el, ras, win, X, Y):
        yield _SparsePart(
            blk.rows,
            blk.cols,
            blk.cover,
            blk.weighted,
            *_records_by_rows(rec_j, rec_i, dev, blk.rows.start, blk.rows.stop),
        )


def _quadrature_parts(el: Element, ras: _Raster) -> Iterator[_Part]:
    """The parts of ``el`` on the raster, with the moments of its coverage."""
    _require_valid(el)
    win = ras.window(_bounds(el))
    j0, j1, i0, i1 = win
    if j0 >= j1 or i0 >= i1:
        return
    X = ras.x[i0:i1] - el.x
    Y = ras.y[j0:j1] - el.y
    turns = _turns(el.angle)
    if isinstance(el, (Rect, Grating, Edge)) and turns is not None:
        yield _separable_part(el, ras, win, X, Y)
    elif isinstance(el, Rect):
        verts = _rotated(_box_vertices(0.5 * el.width, 0.5 * el.height), *_cos_sin(el.angle))
        yield from _polygon_parts(_ring_edges(verts), ras, win, X, Y)
    elif isinstance(el, Grating):
        edges = _grating_edges(el, X, Y, ras.dx, ras.dy)
        pieces = np.sum(np.abs(edges[2] - edges[0]) / ras.dx + np.abs(edges[3] - edges[1]) / ras.dy)
        if pieces <= _MAX_PIECES:
            yield from _polygon_parts(edges, ras, win, X, Y)
        else:  # unresolved or vast: the box-filtered coverage, uniformly spread
            yield from _fallback_parts(_grating_blocks(el, ras, win, X, Y))
    elif isinstance(el, Edge):
        yield from _polygon_parts(_ring_edges(_halfplane_polygon(el, ras)), ras, win, X, Y)
    elif isinstance(el, Annulus):
        yield from _disk_parts(0.5 * el.diameter, 0.5 * el.inner_diameter, ras, win, X, Y)
    elif isinstance(el, Circle):
        yield from _disk_parts(0.5 * el.diameter, 0.0, ras, win, X, Y)
    elif isinstance(el, Polygon):
        verts = _rotated(np.asarray(el.vertices, dtype=np.float64), *_cos_sin(el.angle))
        yield from _polygon_parts(_ring_edges(verts), ras, win, X, Y)
    elif isinstance(el, Image):
        if turns is not None:
            yield from _image_dense_parts(el, ras, win, X, Y)
        else:
            yield from _rotated_image_parts(el, ras, win, X, Y)
    else:
        raise ValueError(f"unknown aperture element {type(el).__name__!r}")


# ------------------------------------------------------------------- stencils


def _op_pad(f: np.ndarray, order: int, axis: int) -> np.ndarray:
    """Scatter ``f`` through Op_order along ``axis``; the result is one longer each side."""
    shape = list(f.shape)
    n = shape[axis]
    shape[axis] = n + 2
    out = np.zeros(shape, dtype=f.dtype)

    def at(lo):
        idx = [slice(None)] * f.ndim
        idx[axis] = slice(lo, lo + n)
        return tuple(idx)

    if order == 0:
        out[at(1)] = f
    elif order == 1:  # adjoint of the central difference (g_{k+1} − g_{k−1})/2
        out[at(2)] += 0.5 * f
        out[at(0)] -= 0.5 * f
    else:  # half the second difference (self-adjoint)
        half = 0.5 * f
        out[at(2)] += half
        out[at(0)] += half
        out[at(1)] -= f
    return out


def _rule_1d(f: np.ndarray) -> np.ndarray:
    """1-D weights ``Σ_k Op_k f[k]`` on the same samples (zero outside them)."""
    w = _op_pad(f[0], 0, 0) + _op_pad(f[1], 1, 0) + _op_pad(f[2], 2, 0)
    return w[1:-1]


def _add_padded(t: np.ndarray, rows: slice, cols: slice, padded: np.ndarray, scale=None) -> None:
    """``t[rows ± 1, cols ± 1] += scale · padded``, dropping what falls off the raster."""
    ny, nx = t.shape
    r0, r1 = rows.start - 1, rows.stop + 1
    c0, c1 = cols.start - 1, cols.stop + 1
    a, b = max(r0, 0), min(r1, ny)
    c, d = max(c0, 0), min(c1, nx)
    src = padded[a - r0 : padded.shape[0] - (r1 - b), c - c0 : padded.shape[1] - (c1 - d)]
    if scale is None:
        t[a:b, c:d] += src
    else:
        t[a:b, c:d] += scale * src


# The weights of a uniformly spread coverage: the tensor product of [1, 22, 1]/24 along
# each axis, as 3 × 3 taps {(oy, ox): weight}. It equals C + (Δ_x + Δ_y) C / 24 to second
# order; its fourth-order corner term Δ_x Δ_y C / 576 is that of the separable shapes'
# product rule, so that every shape shares one filter.
_UNIFORM_TAPS = {
    (oy, ox): (22.0 if oy == 0 else 1.0) * (22.0 if ox == 0 else 1.0) / 576.0
    for oy in (-1, 0, 1)
    for ox in (-1, 0, 1)
}
_NEIGHBOURS = tuple(_UNIFORM_TAPS)
_CENTRE = _NEIGHBOURS.index((0, 0))


def _uniform_filter_pad(f: np.ndarray) -> np.ndarray:
    """The uniform filter of ``f`` (see :data:`_UNIFORM_TAPS`), padded by one."""
    r, c = f.shape
    out = np.zeros((r + 2, c + 2), dtype=f.dtype)
    for (oy, ox), w in _UNIFORM_TAPS.items():
        out[1 + oy : 1 + oy + r, 1 + ox : 1 + ox + c] += w * f
    return out


def _scatter_dense(t: np.ndarray, rows: slice, cols: slice, fields) -> None:
    """``t += Σ Op_p^x Op_q^y fields[(p, q)]`` around the block ``rows``, ``cols``."""
    by_q: dict[int, np.ndarray] = {}
    for (p, q), f in fields.items():
        g = _op_pad(f, p, 1)
        by_q[q] = g if q not in by_q else by_q[q] + g
    total = sum(_op_pad(g, q, 0) for q, g in by_q.items())
    _add_padded(t, rows, cols, total)


def _add_scaled(sub: np.ndarray, f: np.ndarray, scale: complex) -> None:
    """``sub += scale · f``: a complex view ``sub``, a real ``f``, no complex temporaries."""
    for part, k in ((sub.real, scale.real), (sub.imag, scale.imag)):
        if k:
            np.add(part, f if k == 1.0 else k * f, out=part)


def _scatter_values(t: np.ndarray, jj: np.ndarray, ii: np.ndarray, values: np.ndarray) -> None:
    """``t[jj, ii] += values`` for distinct pixels, dropping those off the raster."""
    ny, nx = t.shape
    ok = (jj >= 0) & (jj < ny) & (ii >= 0) & (ii < nx)
    t[jj[ok], ii[ok]] += values[ok]


def _scatter_records(t: np.ndarray, rec_j, rec_i, dev: np.ndarray, amplitude=1.0) -> None:
    """``t +=`` the moment deviations ``dev`` (see :data:`_DEV_ORDERS`) through their stencils.

    ``dev`` holds the first 5 or all 8 orders; each pixel appears once.
    """
    if rec_j.size == 0:
        return
    scaled = dev * amplitude
    taps: dict[tuple[int, int], np.ndarray] = {}
    for (p, q), d in zip(_DEV_ORDERS, scaled, strict=False):
        for ox, cx in _OP_TAPS[p].items():
            for oy, cy in _OP_TAPS[q].items():
                term = (cx * cy) * d
                taps[oy, ox] = term if (oy, ox) not in taps else taps[oy, ox] + term
    for (oy, ox), val in taps.items():
        _scatter_values(t, rec_j + oy, rec_i + ox, val)


def _separable_records(part: _SeparablePart):
    """Raster pixels and 8-order deviations of a separable part (the band along its sides).

    A pixel deviates where its column or its row is cut by an edge: the cut rows
    across all covered columns, and the cut columns across the other covered rows.
    """
    fx, fy = part.fx, part.fy
    unit = (1.0, 0.0, 1.0 / 12.0)
    off_x = (np.abs(fx[1]) > _DEV_TOL) | (np.abs(fx[2] - fx[0] / 12.0) > _DEV_TOL)
    off_y = (np.abs(fy[1]) > _DEV_TOL) | (np.abs(fy[2] - fy[0] / 12.0) > _DEV_TOL)
    cut_rows, cut_cols = np.flatnonzero(off_y), np.flatnonzero(off_x)
    lit_cols = np.flatnonzero(fx[0] > 0)
    other_rows = np.flatnonzero((fy[0] > 0) & ~off_y)
    jj = np.concatenate([np.repeat(cut_rows, lit_cols.size), np.repeat(other_rows, cut_cols.size)])
    ii = np.concatenate([np.tile(lit_cols, cut_rows.size), np.tile(cut_cols, other_rows.size)])
    c = fy[0, jj] * fx[0, ii]
    dev = np.stack([fx[p, ii] * fy[q, jj] - c * unit[p] * unit[q] for p, q in _DEV_ORDERS])
    return jj + part.rows.start, ii + part.cols.start, dev


def _full_around(part: _Part, reach: int = 2):
    """``ok(j, i)``: the part covers all pixels within ``reach`` of raster pixel ``(j, i)``.

    Pixels near the block's edges count as not covered (their neighbours may lie
    in another block).
    """
    if isinstance(part, _SeparablePart):
        fx, fy = part.fx[0] >= 1.0, part.fy[0] >= 1.0
        for _ in range(reach):
            fx, fy = _eroded(fx), _eroded(fy)
        return lambda j, i: fy[j - part.rows.start] & fx[i - part.cols.start]
    full = (part.F[(0, 0)] if isinstance(part, _DensePart) else part.cover) >= 1.0
    for _ in range(reach):
        full = _eroded_2d(full)
    return lambda j, i: full[j - part.rows.start, i - part.cols.start]


# ------------------------------------------------------------------- painting


class _DeviationStore:
    """Moment deviations painted so far, kept per pixel so that later elements remove them.

    An element covering a fraction ``C`` of a pixel hides that fraction of what lies
    below, so the deviations stored there are scaled by ``1 − C`` and the removed
    part is taken off the weights. This keeps the edges of earlier elements hidden
    under a later one out of the sums (they would otherwise stay at O(h²)), and is
    continuous in ``C``. Each painted part adds a chunk: flat raster indices
    (sorted, each once in the chunk) and values (8, n) complex. Removal is linear,
    so a pixel may sit in several chunks.
    """

    def __init__(self, shape: tuple[int, int]):
        self.nx = shape[1]
        self.chunks: list[list[np.ndarray]] = []  # [keys, vals, alive]

    def add(self, rec_j: np.ndarray, rec_i: np.ndarray, dev: np.ndarray) -> None:
        if rec_j.size == 0:
            return
        keys = rec_j * self.nx + rec_i
        if dev.shape[0] < 8:
            dev = np.concatenate([dev, np.zeros((8 - dev.shape[0], keys.size), dev.dtype)])
        if np.any(keys[1:] < keys[:-1]):
            order = np.argsort(keys, kind="stable")
            keys, dev = keys[order], dev[:, order]
        self.chunks.append([keys, dev.astype(complex, copy=False), np.ones(keys.size, bool)])

    def take_under(self, t: np.ndarray, part: _Part) -> None:
        """Remove the part's coverage ``C`` times the deviations stored in its block.

        Where the part covers the whole 5 × 5 neighbourhood, the removal would only
        reach pixels that :class:`_DeepInterior` sets anyway: those entries are just
        dropped.
        """
        rows, cols = part.rows, part.cols
        for keys, vals, alive in self.chunks:
            a, b = np.searchsorted(keys, [rows.start * self.nx, rows.stop * self.nx])
            if a == b:
                continue
            jj, ii = np.divmod(keys[a:b], self.nx)
            inside = (ii >= cols.start) & (ii < cols.stop) & alive[a:b]
            sel = a + np.flatnonzero(inside)
            if sel.size == 0:
                continue
            jj, ii = jj[inside], ii[inside]
            c = _cover_lookup(part)(jj, ii)
            hit = c > 0
            sel, c, jj, ii = sel[hit], c[hit], jj[hit], ii[hit]
            if sel.size == 0:
                continue
            full = c >= 1.0
            alive[sel[full]] = False
            if np.any(full) and _sets_deep_interior(part):
                hidden = np.zeros(full.size, bool)
                hidden[full] = _full_around(part)(jj[full], ii[full])
                keep = ~hidden
                sel, c, jj, ii = sel[keep], c[keep], jj[keep], ii[keep]
            picked = vals[:, sel]
            _scatter_records(t, jj, ii, picked * c, -1.0)
            vals[:, sel] = picked * (1.0 - c)


def _sets_deep_interior(part: _Part) -> bool:
    """Whether :class:`_DeepInterior` sets the weights deep inside this part (uniform value)."""
    if isinstance(part, _SeparablePart):
        return True
    return isinstance(part, _SparsePart) and part.weighted is None


def _cover_lookup(part: _Part):
    """``C`` of a part at raster pixels inside its block."""
    if isinstance(part, _SeparablePart):
        return lambda j, i: part.fy[0, j - part.rows.start] * part.fx[0, i - part.cols.start]
    cover = part.F[(0, 0)] if isinstance(part, _DensePart) else part.cover
    return lambda j, i: cover[j - part.rows.start, i - part.cols.start]


@dataclass(frozen=True)
class _Canvas:
    """The weights being painted, the plain transmittance and the deviations below.

    ``plain`` and ``store`` are None when no element overlaps an earlier one;
    ``update`` says whether a later element reads what the current one paints.
    """

    t: np.ndarray
    plain: np.ndarray | None
    store: _DeviationStore | None
    background: float
    update: bool


def _paint_element(el: Element, ras: _Raster, cv: _Canvas, value: complex, over: bool) -> None:
    """Paint the weights of one element: over a uniform background, or over earlier ones."""
    if not over:
        for part in _quadrature_parts(el, ras):
            recs = _paint_part(part, cv, value, cv.background)
            if cv.update and recs is not None:
                cv.store.add(*recs)
        return
    deep = _DeepInterior(cv.t, value)
    for part in _quadrature_parts(el, ras):
        cv.store.take_under(cv.t, part)
        recs = _paint_part(part, cv, value, None)
        if cv.update and recs is not None:
            cv.store.add(*recs)
        deep.push(part)
    deep.finish()


def _paint_part(part: _Part, cv: _Canvas, value: complex, under):
    """Add the weights of one part to ``cv.t`` and its plain coverage to ``cv.plain``.

    ``under`` is the plain transmittance below the element where it is uniform (a
    number), else None and ``cv.plain`` holds it per pixel. Returns the deviation
    records painted, ``(rec_j, rec_i, dev)`` times their amplitude, when
    ``cv.update`` asks for them (None for images at a right angle, whose
    sub-pixel terms are not kept).
    """
    if isinstance(part, _SeparablePart):
        return _paint_separable(part, cv, value, under)
    if isinstance(part, _DensePart):
        below = under if under is not None else cv.plain[part.rows, part.cols]
        fields = {k: value * part.G[k] - below * part.F[k] for k in _ORDERS_PRODUCT}
        _scatter_dense(cv.t, part.rows, part.cols, fields)
        if cv.update:
            cv.plain[part.rows, part.cols] += fields[(0, 0)]
        return None
    return _paint_sparse(part, cv, value, under)


def _paint_separable(part: _SeparablePart, cv: _Canvas, value: complex, under):
    t, plain = cv.t, cv.plain
    nrows, ncols = part.fy.shape[1], part.fx.shape[1]
    j0, cols = part.rows.start, part.cols
    recs = None
    if cv.update:
        rj, ri, dev = _separable_records(part)
        below = under if under is not None else plain[rj, ri]
        recs = (rj, ri, dev * (value - below))
    if under is not None:
        step = value - under
        wx, wy = _rule_1d(part.fx), _rule_1d(part.fy)
        for r0, r1 in _row_blocks(nrows, ncols):
            rows = slice(j0 + r0, j0 + r1)
            _add_scaled(t[rows, cols], np.outer(wy[r0:r1], wx), step)
            if cv.update:
                _add_scaled(plain[rows, cols], np.outer(part.fy[0, r0:r1], part.fx[0]), step)
        return recs
    for r0, r1 in _row_blocks(nrows, 9 * ncols):
        rows = slice(j0 + r0, j0 + r1)
        step = value - plain[rows, cols]
        fields = {
            (p, q): step * np.outer(part.fy[q, r0:r1], part.fx[p]) for p, q in _ORDERS_PRODUCT
        }
        _scatter_dense(t, rows, cols, fields)
        if cv.update:
            plain[rows, cols] += fields[(0, 0)]
    return recs


def _record_amplitude(part: _SparsePart, cv: _Canvas, value: complex, under):
    """``v − t_prev`` at the records of a part, ``v`` times the pixel's grey level for an image."""
    rj, ri = part.rec_j, part.rec_i
    below = under if under is not None else cv.plain[rj, ri]
    if part.weighted is None:
        return value - below
    lj, li = rj - part.rows.start, ri - part.cols.start
    c = part.cover[lj, li]
    grey = np.divide(part.weighted[lj, li], c, out=np.zeros_like(c), where=c > 0)
    return value * grey - below


def _paint_sparse(part: _SparsePart, cv: _Canvas, value: complex, under):
    t, plain = cv.t, cv.plain
    rows, cols = part.rows, part.cols
    amp = _record_amplitude(part, cv, value, under) if part.rec_j.size else 1.0
    recs = (part.rec_j, part.rec_i, part.dev * amp) if cv.update else None
    if part.local is not None and part.weighted is None:
        _paint_local(part, cv, value, under)
    elif under is not None and part.weighted is None:
        step = value - under
        _add_padded(t, rows, cols, _uniform_filter_pad(part.cover), step)
        if cv.update:
            _add_scaled(plain[rows, cols], part.cover, step)
    else:
        below = under if under is not None else plain[rows, cols]
        if part.weighted is None:
            painted = (value - below) * part.cover
        else:
            painted = value * part.weighted - below * part.cover
        _add_padded(t, rows, cols, _uniform_filter_pad(painted))
        if cv.update:
            plain[rows, cols] += painted
    _scatter_records(t, part.rec_j, part.rec_i, part.dev, amp)
    return recs


def _paint_local(part: _SparsePart, cv: _Canvas, value: complex, under) -> None:
    """Paint ``C`` and its uniform filter for a part that lists where the filter acts.

    See ``_SparsePart.local``. Over a uniform ``under`` this is ``step`` times the
    filtered ``C``. Otherwise the same is painted with ``step = value − background``
    and the filtered ``(t_prev − background) · C`` is taken off on the listed pixels
    only: elsewhere a pixel is either untouched or deep inside the element, where
    :class:`_DeepInterior` sets the exact weight.
    """
    t, plain = cv.t, cv.plain
    rows, cols = part.rows, part.cols
    tj, ti, c = part.local
    base = under if under is not None else cv.background
    step = value - base
    _add_scaled(t[rows, cols], part.cover, step)
    # filter(C) − C on the listed pixels; c[k] is C at _NEIGHBOURS[k] (0 off the raster)
    excess = sum(w * c[k] for k, w in enumerate(_UNIFORM_TAPS.values())) - c[_CENTRE]
    _scatter_values(t, tj, ti, step * excess)
    if under is None and tj.size:
        ny, nx = t.shape
        filtered = 0.0
        for k, ((oy, ox), w) in enumerate(_UNIFORM_TAPS.items()):
            jj = np.clip(tj + oy, 0, ny - 1)
            ii = np.clip(ti + ox, 0, nx - 1)
            filtered = filtered + w * (plain[jj, ii] - base) * c[k]
        _scatter_values(t, tj, ti, -filtered)
    if cv.update:
        sub = plain[rows, cols]
        if under is not None:
            _add_scaled(sub, part.cover, step)
        else:
            sub += (value - sub) * part.cover


def _windows_overlap(a, b) -> bool:
    return a[0] < b[1] and b[0] < a[1] and a[2] < b[3] and b[2] < a[3]


class _DeepInterior:
    """Sets the weights to ``value`` where a uniform element covers all of a 3 × 3 block.

    There the exact weight is ``v`` itself, whatever lay below: the stored
    deviations under it are gone (:class:`_DeviationStore`), and the sub-pixel
    terms of images, which are not stored, go too. It also lets a disk paint its
    filter on its boundary band only. Row blocks are settled one behind, so that
    each sees its neighbours' rows.
    """

    def __init__(self, t: np.ndarray, value: complex):
        self.t, self.value = t, value
        self.pending = None  # (rows, cols, full mask) of the previous block
        self.above = None  # full mask of the row above the pending block
        self.off = False

    def push(self, part: _Part) -> None:
        if self.off:
            return
        if isinstance(part, _SeparablePart):
            full_x = _eroded(part.fx[0] >= 1.0)
            full_y = _eroded(part.fy[0] >= 1.0)
            jj = part.rows.start + np.flatnonzero(full_y)
            ii = part.cols.start + np.flatnonzero(full_x)
            if jj.size and ii.size:
                self.t[np.ix_(jj, ii)] = self.value
            return
        if not _sets_deep_interior(part):
            self.off = True  # images: the value varies over the element
            return
        full = part.cover >= 1.0
        if self.pending is not None:
            self._settle(full[0])
        self.pending = (part.rows, part.cols, full)

    def finish(self) -> None:
        if self.pending is not None and not self.off:
            self._settle(None)

    def _settle(self, below) -> None:
        rows, cols, full = self.pending
        r, c = full.shape
        pad = np.zeros((r + 2, c + 2), bool)
        pad[1:-1, 1:-1] = full
        if self.above is not None:
            pad[0, 1:-1] = self.above
        if below is not None:
            pad[-1, 1:-1] = below
        deep = np.ones((r, c), bool)
        for oy in range(3):
            for ox in range(3):
                deep &= pad[oy : oy + r, ox : ox + c]
        self.t[rows, cols][deep] = self.value
        self.above = full[-1]
        self.pending = None


def _eroded_2d(mask: np.ndarray) -> np.ndarray:
    """``mask`` and all 8 neighbours (False beyond the borders)."""
    r, c = mask.shape
    pad = np.zeros((r + 2, c + 2), bool)
    pad[1:-1, 1:-1] = mask
    out = mask.copy()
    for oy in range(3):
        for ox in range(3):
            if oy != 1 or ox != 1:
                out &= pad[oy : oy + r, ox : ox + c]
    return out


def _eroded(mask: np.ndarray) -> np.ndarray:
    """``mask`` and both its neighbours (False beyond the ends)."""
    out = mask.copy()
    out[1:] &= mask[:-1]
    out[:-1] &= mask[1:]
    out[0] = out[-1] = False
    return out


def _constant(shape, value: float, dtype) -> np.ndarray:
    # np.zeros maps zero pages lazily: much cheaper than filling a large raster.
    return np.full(shape, value, dtype=dtype) if value else np.zeros(shape, dtype=dtype)


def _overlapping_earlier(windows: list) -> list[bool]:
    """Whether each window meets the window of any earlier element."""
    return [any(_windows_overlap(w, windows[m]) for m in range(k)) for k, w in enumerate(windows)]


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


def quadrature_transmittance(
    aperture: Aperture, x, y, *, pitch: Sequence[float] | None = None, dtype=np.complex128
) -> np.ndarray:
    """Quadrature weights of ``aperture`` at the pixel centres, (ny, nx), complex.

    ``Σ T[j, i] g(x[i], y[j]) dx dy`` equals ``∫ t(s) g(s) d²s`` to ``O(h⁴)`` for any
    smooth ``g`` (a Fresnel chirp, a plane-wave phase, a beam), ``h`` the pitch, and
    exactly for every ``g`` of degree ≤ 2 where the moments are exact and no pixel
    holds edges of two elements. The area-weighted :func:`transmittance`
    errs at ``O(h²)`` wherever an edge is off the pixel lines: the covered part of
    a pixel has its centroid off the pixel centre, and its second moment is not
    that of a full pixel. Use these weights in place of the transmittance inside
    the propagation sums; the transmittance stays the picture of the aperture.

    Per pixel, ``∫_pixel t g`` is expanded to second order about the pixel centre
    in the moments of the covered part (covered fraction ``C``, first moments ``M``,
    second moments ``S``, in pixel units). Central differences stand in for the
    derivatives of ``g``, and summation by parts moves them onto the moments:

    ``T = C + (M_x[i−1] − M_x[i+1])/2 + (S_xx[i−1] − 2 S_xx[i] + S_xx[i+1])/2 + (same in y)
    + (S_xy[j−1,i−1] − S_xy[j+1,i−1] − S_xy[j−1,i+1] + S_xy[j+1,i+1])/4``.

    A full pixel has ``C = 1``, ``M = 0``, ``S_xx = S_yy = 1/12``, so uniform regions
    keep their value, and an edge on the pixel lines gets the [1, 22, 1]/24 end
    correction of the midpoint rule (Euler–Maclaurin); a pixel-aligned shape gets
    exactly the separable [1, 22, 1]/24 filter of its coverage. Axis-aligned rects,
    gratings, edges and images keep the full tensor product of the 1-D rules.

    Moments are exact for rects, gratings, edges, polygons and right-angle images
    (1-D overlaps; signed-area accumulation of polygon pieces, extended to first
    and second moments) and for circles and annuli (Green's theorem on the disk ∩
    pixel). Coverages here are exact for every shape, so for circles and rotated
    gratings they differ slightly from :func:`transmittance`'s at the boundary.

    Painting follows :func:`transmittance`: an element of value ``v`` over the plain
    transmittance ``t_prev`` adds ``v − t_prev`` (per pixel, ``v`` times the pixel's
    grey level for a rotated image) times the weights of its moments; the
    background gets no correction. Deviations of earlier elements are scaled by
    ``1 − C`` under a later one, and where it covers a pixel's whole 3 × 3
    neighbourhood the weight is just its value, so hidden edges leave no trace.

    Approximations: where edges of two elements cut the same pixel, that pixel is
    first order; a rotated image takes the moments of its exact footprint with the
    pixel's mean grey level; the sub-pixel terms inside a right-angle image are
    not taken off by a later element near its edge; a rotated grating whose visible
    edges would cut the grid into more than ``4·10⁷`` pieces keeps its box-filtered
    coverage with the moments of uniform pixels (the [1, 22, 1]/24 filter).

    Requirement: the stencils reach one pixel beyond each pixel and take
    everything outside the raster as zero, so the grid needs an empty margin of at
    least one pixel around the lit region; then ``Σ T`` is the sum of the plain
    painted transmittance, exactly. Where the lit region reaches the raster border
    (an edge element), the border acts as an edge of the integration domain.

    Parameters
    ----------
    aperture, x, y, pitch, dtype
        As :func:`transmittance`.

    Raises
    ------
    ValueError
        As :func:`transmittance`.

    References
    ----------
    P. J. Davis and P. Rabinowitz, *Methods of Numerical Integration*, 2nd ed.
    (1984), §2.9 (Euler–Maclaurin summation formula; the second-order midpoint
    term). Green's theorem for the moments of a region from its boundary
    (standard calculus).
    """
    dtype = np.dtype(dtype)
    if dtype.kind != "c":
        raise ValueError(f"dtype must be a complex type, got {dtype}")
    ras = _raster(x, y, pitch)
    elements = list(aperture.elements)
    for el in elements:
        _require_valid(el)
    background = 1.0 if aperture.background == "clear" else 0.0
    t = _constant(ras.shape, background, dtype)
    windows = [ras.window(_bounds(el)) for el in elements]
    shared = _overlapping_earlier(windows)
    read_later = _overlapping_earlier(windows[::-1])[::-1]  # a later element overlaps
    # The plain transmittance and the deviations are only needed under elements that
    # overlap earlier ones.
    layered = any(shared)
    plain = _constant(ras.shape, background, dtype) if layered else None
    store = _DeviationStore(ras.shape) if layered else None
    for el, over, later in zip(elements, shared, read_later, strict=True):
        value = complex(el.transmission * cmath.exp(1j * el.phase))
        cv = _Canvas(t, plain, store, background, layered and later)
        _paint_element(el, ras, cv, value, over)
    return t


def power_transmittance(aperture: Aperture, x, y, *, pitch: Sequence[float] | None = None):
    """Area-weighted power transmittance ``|t|²`` of each pixel, float64 (ny, nx).

    The power through the aperture is ``Σ |incident|² p dx dy``. Painting follows
    :func:`transmittance` with ``|v|²`` for ``v``: ``p <- p·(1 − c) + |v|²·c``, an image
    painting ``|v|²`` times its squared grey level averaged over the pixel. Note
    that ``Σ |transmittance|²`` underestimates the power at the edges, since the
    square of a mean is less than the mean of the square. Circles, annuli and
    rotated gratings use the exact coverage of :func:`quadrature_transmittance`.
    Arguments and errors as :func:`transmittance`.
    """
    ras = _raster(x, y, pitch)
    background = 1.0 if aperture.background == "clear" else 0.0
    p = np.full(ras.shape, background)
    for el in aperture.elements:
        v2 = float(el.transmission) ** 2
        for rows, cols, cover, weighted in _power_blocks(el, ras):
            sub = p[rows, cols]
            sub *= 1.0 - cover
            sub += v2 * (cover if weighted is None else weighted)
    return p


def _power_blocks(el: Element, ras: _Raster):
    """(rows, cols, coverage, squared grey level or None) of ``el`` for the power."""
    if isinstance(el, (Circle, Annulus)) or (isinstance(el, Grating) and _turns(el.angle) is None):
        for part in _quadrature_parts(el, ras):
            yield part.rows, part.cols, part.cover, part.weighted
    elif isinstance(el, Image):
        _require_valid(el)
        win = ras.window(_bounds(el))
        j0, j1, i0, i1 = win
        if j0 < j1 and i0 < i1:
            X, Y = ras.x[i0:i1] - el.x, ras.y[j0:j1] - el.y
            for blk in _image_blocks(el, ras, win, X, Y, squared=True):
                yield blk.rows, blk.cols, blk.cover, blk.weighted
    else:
        for blk in _blocks(el, ras):
            yield blk.rows, blk.cols, blk.cover, blk.weighted


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

    The second term catches slivers and narrow gaps that have long edges. Only
    vertex–edge pairs closer than the shortest edge can change the answer, and a
    vertex within ``r`` of an edge of length ``l`` lies within ``r + l/2`` of its
    midpoint; a k-d tree finds those pairs, so a many-sided polygon costs about
    ``n log n`` instead of ``n²`` (the distances of the pairs are computed as before).
    """
    a = verts
    b = np.roll(verts, -1, axis=0)
    seg = b - a
    lengths = np.hypot(seg[:, 0], seg[:, 1])
    positive = lengths[lengths > 0]
    candidates = [positive]
    n = len(verts)
    if n >= 3:
        len2 = np.where(lengths > 0, lengths**2, 1.0)
        if positive.size:
            reach = (float(positive.min()) + 0.5 * lengths) * (1 + 1e-9) + 1e-300
            tree = cKDTree(verts)
            near = tree.query_ball_point(0.5 * (a + b), reach)
            counts = np.fromiter((len(p) for p in near), dtype=np.intp, count=n)
            edge = np.repeat(np.arange(n), counts)
            vertex = np.fromiter(
                (v for p in near for v in p), dtype=np.intp, count=int(counts.sum())
            )
        else:  # every edge has zero length: every pair
            vertex, edge = (g.ravel() for g in np.meshgrid(np.arange(n), np.arange(n)))
        keep = (vertex != edge) & (vertex != (edge + 1) % n)  # not the edges touching it
        vertex, edge = vertex[keep], edge[keep]
        rel = verts[vertex] - a[edge]
        sg = seg[edge]
        t = np.clip((rel[:, 0] * sg[:, 0] + rel[:, 1] * sg[:, 1]) / len2[edge], 0.0, 1.0)
        closest = rel - t[:, None] * sg
        dist = np.hypot(closest[:, 0], closest[:, 1])
        candidates.append(dist[dist > 0])
    values = np.concatenate(candidates)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return math.sqrt(abs(_shoelace(verts)))
    return float(values.min())


def _polygon_feature_pairwise(verts: np.ndarray) -> float:
    """:func:`_polygon_feature` over every vertex–edge pair (the reference for tests)."""
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
