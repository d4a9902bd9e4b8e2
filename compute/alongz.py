"""Irradiance along the beam: one horizontal cut y = y0 at many distances, as an x–z image.

The aperture field is sampled once. Its angular spectrum A is formed once for a
run of distances, and at every distance z the band-limited angular-spectrum
transfer function H(z) (Goodman §3.10; Matsushima and Shimobaba 2009) multiplies
it. Only the row y = y0 of the inverse transform is formed, which is exact
without a 2-D inverse transform:

    U(x, y0; z) = Σ_fx e^{2πi fx x} Δfx · [ Σ_fy A(fx, fy) H(fx, fy; z) e^{2πi fy y0} Δfy ],

a sum over fy for each fx, then a 1-D transform onto the chosen x positions (a
matrix product). H depends on fx² and fy² only, so the sums run over |fx|, |fy|
with the spectrum folded once, and H is formed on a quarter of the grid; beyond
the band limit the window is zero and that part of the spectrum is not touched.

The spectrum needs a frequency step fine enough for the farthest distance of a
run (the periodic window 1/Δf must hold the aperture, the cut and the reach of
the kernel, as in :mod:`compute.planning`) and a band wide enough for the
nearest (the steepest angle from the aperture to the cut). The distances are
therefore split into runs: near ones from one FFT of the zero-padded aperture,
far ones — which need a fine step over a narrow band — from a matrix Fourier
transform at just those frequencies (the same numbers a larger padded FFT would
give). Where even that does not fit in ``max_grid`` samples per side, a row is
computed with the frequencies that fit, and :attr:`AlongZ.resolved` says, row by
row, whether every frequency that reaches the cut was kept.

Regimes are marked by the Fresnel number N_F = a²/(λz), a the half-width of the
lit region along its larger side (the planner's convention): near field for
N_F > 10, Fresnel zone for 0.1 < N_F < 10, Fraunhofer zone for N_F < 0.1. The
two thresholds are common practice, no source.

References
----------
.. [G] J. W. Goodman, *Introduction to Fourier Optics*, 3rd ed. (2005), §3.10
   (angular spectrum and its propagation), §4.5.1 (Fresnel number).
.. [MS] K. Matsushima and T. Shimobaba, "Band-limited angular spectrum method
   for numerical simulation of free-space propagation in far and near fields,"
   Opt. Express 17, 19662–19673 (2009).
.. [SJ] R. Soummer et al., "Fast computation of Lyot-style coronagraph
   propagation," Opt. Express 15, 15935–15951 (2007) (the matrix Fourier transform).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from . import apertures, planning, propagators, sources
from . import fft as _fft
from .errors import SetupError
from .fft import next_fast_len
from .model import Setup
from .planning import DEFAULT_MEMORY_LIMIT
from .sweep import Cancelled

__all__ = [
    "FRESNEL_ZONE_LIMITS",
    "AlongZ",
    "AlongZPlan",
    "Boundary",
    "Segment",
    "along_z",
    "plan_along_z",
]

#: Fresnel numbers that bound the regimes: near field above the first, Fraunhofer
#: zone below the second (common practice, no source).
FRESNEL_ZONE_LIMITS = (10.0, 0.1)
#: Default nearest distance, as a fraction of the size D of the lit region.
Z_MIN_FRACTION = 0.5
#: Default farthest distance, as a multiple of the Fraunhofer distance 2D²/λ.
Z_MAX_FRAUNHOFER = 10.0
DEFAULT_COUNT = 200
DEFAULT_MAX_GRID = 2048
MAX_COUNT = 4096
MAX_POINTS_X = 8192
ROLLOFF = 0.2  # fraction of the band limit rolled off, as in the engine's kernel


@dataclass(frozen=True)
class Boundary:
    """A regime boundary: the distance ``z`` (m) where N_F equals ``fresnel_number``."""

    label: str
    fresnel_number: float
    z: float


@dataclass(frozen=True)
class Segment:
    """A run of distances ``z[start:stop]`` computed from one spectrum of the aperture.

    ``route`` is ``"fft"`` (a zero-padded FFT of ``padded`` = (ny, nx) samples) or
    ``"matrix"`` (a matrix Fourier transform); ``counts`` (ky, kx) frequencies are
    kept per axis at ``step`` (Δfy, Δfx), cycles/m: |f| = 0, Δf, …, (k − 1)Δf.
    """

    start: int
    stop: int
    route: str
    counts: tuple[int, int]
    step: tuple[float, float]
    padded: tuple[int, int] | None = None


@dataclass
class AlongZPlan:
    """How an along-z image is computed: distances, cut, sampling and runs.

    ``pitch`` (dy, dx) is the sampling of the aperture, m; ``samples`` (ny, nx)
    its size; ``resolved[k]`` is true when every frequency that reaches the cut at
    ``z[k]`` is kept; ``fresnel_number[k]`` is a²/(λ z[k]) with ``half_width`` = a.
    """

    z: np.ndarray
    x: np.ndarray
    y0: float
    pitch: tuple[float, float]
    samples: tuple[int, int]
    half_width: float
    lit_box: tuple[float, float, float, float] | None
    babinet: bool
    segments: list[Segment]
    resolved: np.ndarray
    fresnel_number: np.ndarray
    memory_bytes: int
    reasons: list[str] = field(default_factory=list)


@dataclass
class AlongZ:
    """An x–z image of irradiance along the cut y = ``y0``.

    ``intensity[k, i]`` is the irradiance, W/m², at (``x[i]``, ``y0``) on the plane
    at distance ``z[k]`` behind the aperture (behind the lens when one is set).
    """

    z: np.ndarray
    x: np.ndarray
    y0: float
    intensity: np.ndarray
    fresnel_number: np.ndarray
    boundaries: list[Boundary]
    fraunhofer_distance: float
    resolved: np.ndarray
    plan: AlongZPlan
    elapsed_s: float


# --------------------------------------------------------------------------- planning


def _check_arguments(z_min, z_max, count, y0, x) -> None:
    if not (isinstance(count, int) and not isinstance(count, bool) and 2 <= count <= MAX_COUNT):
        raise ValueError(f"count must be a whole number from 2 to {MAX_COUNT}, got {count!r}")
    for name, v in (("z_min", z_min), ("z_max", z_max), ("y0", y0)):
        if v is not None and (
            isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v)
        ):
            raise ValueError(f"{name} must be a finite number in metres, got {v!r}")
    for name, v in (("z_min", z_min), ("z_max", z_max)):
        if v is not None and v <= 0:
            raise ValueError(f"{name} must be a positive distance in metres, got {v!r}")
    if z_min is not None and z_max is not None and not z_max > z_min:
        raise ValueError(f"z_max ({z_max:g} m) must be greater than z_min ({z_min:g} m)")
    if x is not None:
        xs = np.asarray(x, dtype=np.float64)
        if xs.ndim != 1 or not 1 <= xs.size <= MAX_POINTS_X or not np.all(np.isfinite(xs)):
            raise ValueError(f"x must be 1 to {MAX_POINTS_X} finite positions in metres")
        if xs.size > 1 and not np.all(np.diff(xs) > 0):
            raise ValueError("x must be strictly increasing")


def _band_limit(step: float, lam: float, z: float) -> float:
    """Matsushima–Shimobaba band limit 1/(λ √((2 Δf z)² + 1)) for a frequency step Δf."""
    return 1.0 / (lam * math.sqrt((2.0 * step * z) ** 2 + 1.0))


@dataclass
class _Axis:
    """What one axis needs at every distance: pitch, needed frequency and span."""

    pitch: float
    feature_pitch: float
    samples: int  # aperture samples across, with two empty pixels each side
    need: np.ndarray  # highest frequency reaching the cut, cycles/m
    span: np.ndarray  # periodic window the spectrum must hold, m


def _axis(box, cut, z, lam, extra, feature, max_grid) -> _Axis:
    extent = box[1] - box[0]
    sep = planning._max_sep(box, cut)
    # The direction sine of the steepest aperture-to-cut ray over λ, plus what the
    # incident wave and a lens add (as the planner does).
    need = np.minimum(1.0 / lam, sep / np.hypot(sep, z) / lam) + extra
    reach = planning.KERNEL_REACH_FRESNEL_SCALES * np.sqrt(lam * z)
    # No light folded onto the cut by the periodic transform (span ≥ 2 sep), and the
    # band-limited kernel reaching across with several Fresnel zones to spare.
    span = np.maximum(2.0 * sep, 2.5 * (sep + reach))
    d_feature = extent / planning.MIN_SAMPLES_ACROSS
    if math.isfinite(feature):
        d_feature = min(d_feature, feature / planning.SAMPLES_PER_FEATURE)
    d = 1.0 / (2.0 * planning.OVERSAMPLE * float(need[0]))
    # No finer than the nearest run can use through one padded FFT, no coarser than
    # the aperture's features allow, and at most max_grid samples across the aperture.
    d = min(d_feature, max(d, float(span[0]) / (max_grid - 4)))
    d = max(d, extent / (max_grid - 6))
    samples = math.ceil(extent / d) + 5
    return _Axis(pitch=d, feature_pitch=d_feature, samples=samples, need=need, span=span)


def _fft_size(ax: _Axis, j: int, max_grid: int) -> int | None:
    n = next_fast_len(max(math.ceil(float(ax.span[j]) / ax.pitch) + 4, ax.samples))
    return n if n <= max_grid else None


def _matrix_count(ax: _Axis, i: int, j: int, z: np.ndarray, lam: float) -> int:
    """Frequencies a matrix-transform run z[i..j] keeps along one axis, untruncated."""
    step = 1.0 / float(ax.span[j])
    top = min(0.5 / ax.pitch, _band_limit(step, lam, float(z[i])))
    return math.floor(top / step) + 1


def _flat_top(limit: float, lam: float) -> float:
    """Where the rolled-off band window starts to fall (as ``propagators._band_window``)."""
    return limit * (1.0 - ROLLOFF * min(1.0, max(0.0, 5.0 * (1.0 - lam * limit))))


def _matrix_fits(ax: _Axis, i: int, j: int, z: np.ndarray, lam: float, cap: int) -> bool:
    """Whether z[i..j] can share one matrix-transform spectrum of at most ``cap`` frequencies.

    Either every row keeps its whole band, or the band that fits still holds what
    reaches the cut from the nearest row; rows that no band that fits can resolve
    are grouped while the frequency step changes by less than a quarter.
    """
    if _matrix_count(ax, i, j, z, lam) <= cap:
        return True
    if ax.need[i] <= _flat_top((cap - 1) / float(ax.span[j]), lam):
        return True
    hopeless = ax.need[i] > _flat_top((cap - 1) / float(ax.span[i]), lam)
    return hopeless and float(ax.span[j]) <= 1.25 * float(ax.span[i])


def _segments(axes: list[_Axis], z: np.ndarray, lam: float, max_grid: int) -> list[Segment]:
    """Split the distances into runs that share one spectrum (near runs by FFT)."""
    cap = max_grid // 2 + 1
    out: list[Segment] = []
    n_z = z.size
    i = 0
    while i < n_z:
        if all(_fft_size(a, i, max_grid) for a in axes):
            j = i
            while j + 1 < n_z and all(_fft_size(a, j + 1, max_grid) for a in axes):
                j += 1
            ny, nx = (_fft_size(a, j, max_grid) for a in reversed(axes))
            ax_x, ax_y = axes
            out.append(
                Segment(
                    i,
                    j + 1,
                    "fft",
                    (ny // 2 + 1, nx // 2 + 1),
                    (1.0 / (ny * ax_y.pitch), 1.0 / (nx * ax_x.pitch)),
                    (ny, nx),
                )
            )
            i = j + 1
            continue
        j = i
        while j + 1 < n_z and all(_matrix_fits(a, i, j + 1, z, lam, cap) for a in axes):
            j += 1
        kx, ky = (min(cap, _matrix_count(a, i, j, z, lam)) for a in axes)
        out.append(
            Segment(
                i,
                j + 1,
                "matrix",
                (ky, kx),
                (1.0 / float(axes[1].span[j]), 1.0 / float(axes[0].span[j])),
            )
        )
        i = j + 1
    return out


def _resolved(axes: list[_Axis], segs: list[Segment], z: np.ndarray, lam: float) -> np.ndarray:
    ok = np.ones(z.size, bool)
    for axis, ax in enumerate(axes):
        ok &= ax.need <= 1.0 / (2.0 * planning.OVERSAMPLE * ax.pitch) * (1 + 1e-9)
        ok &= ax.pitch <= ax.feature_pitch * (1 + 1e-9)
        for s in segs:
            step, count = s.step[1 - axis], s.counts[1 - axis]
            for k in range(s.start, s.stop):
                kept = min((count - 1) * step, _band_limit(step, lam, float(z[k])))
                ok[k] &= 1.0 / step >= ax.span[k] * (1 - 1e-9)
                ok[k] &= ax.need[k] <= _flat_top(kept, lam) * (1 + 1e-9)
    return ok


def plan_along_z(
    setup: Setup,
    *,
    z_min: float | None = None,
    z_max: float | None = None,
    count: int = DEFAULT_COUNT,
    y0: float | None = None,
    x: np.ndarray | None = None,
    max_grid: int = DEFAULT_MAX_GRID,
    memory_limit: int = DEFAULT_MEMORY_LIMIT,
) -> AlongZPlan:
    """Choose the distances, the cut, the sampling and the runs of an along-z image.

    Nothing is propagated. Parameters are those of :func:`along_z`.

    Raises
    ------
    SetupError
        For an unbounded aperture, a setup that breaks a model rule, or work over
        ``memory_limit``.
    ValueError
        For a bad argument.
    """
    _check_arguments(z_min, z_max, count, y0, x)
    if not (isinstance(max_grid, int) and 64 <= max_grid <= 32768):
        raise ValueError(f"max_grid must be a whole number from 64 to 32768, got {max_grid!r}")
    problems = setup.check()
    if problems:
        raise SetupError(*problems[0])
    g = planning._geometry(setup)
    if any(g.unbounded):
        raise SetupError(
            "aperture.elements",
            "the view along the beam needs a bounded aperture; on an opaque background "
            "an edge lets light through everywhere on one side. Add an opening that "
            "bounds it, or use a clear background",
        )
    lam = setup.source.wavelength
    xs = planning.screen_axes(setup)[0] if x is None else np.asarray(x, dtype=np.float64)
    row = float(setup.screen.y if y0 is None else y0)
    box = g.lit
    if box is None:
        half = 0.0
        size = 0.5 * max(setup.screen.width, setup.screen.height)  # a length scale only
    else:
        half = 0.5 * max(box[1] - box[0], box[3] - box[2])
        size = 2.0 * half
    lo = Z_MIN_FRACTION * size if z_min is None else float(z_min)
    hi = Z_MAX_FRAUNHOFER * 2.0 * size**2 / lam if z_max is None else float(z_max)
    reasons: list[str] = []
    if not hi > lo:
        hi = 10.0 * lo
        reasons.append("the farthest distance was not beyond the nearest; it is set 10× beyond")
    z = np.geomspace(lo, hi, count)
    fresnel = half**2 / (lam * z)
    if box is None:
        return AlongZPlan(
            z=z,
            x=xs,
            y0=row,
            pitch=(0.0, 0.0),
            samples=(0, 0),
            half_width=0.0,
            lit_box=None,
            babinet=g.babinet,
            segments=[],
            resolved=np.ones(count, bool),
            fresnel_number=fresnel,
            memory_bytes=0,
            reasons=["no light passes the aperture except the unobstructed beam"],
        )
    src, f = setup.source, setup.screen.lens_focal_length
    rx, ry = planning._abs_max(box[:2]), planning._abs_max(box[2:])
    ftx, fty = sources.local_frequency(src, rx, ry)
    lens_x, lens_y = (rx / (lam * abs(f)), ry / (lam * abs(f))) if f else (0.0, 0.0)
    cut_x = (float(xs[0]), float(xs[-1]))
    axes = [
        _axis(box[:2], cut_x, z, lam, ftx + lens_x, g.feature, max_grid),
        _axis(box[2:], (row, row), z, lam, fty + lens_y, g.feature, max_grid),
    ]
    segs = _segments(axes, z, lam, max_grid)
    resolved = _resolved(axes, segs, z, lam)
    samples = (axes[1].samples, axes[0].samples)
    b = 8 if setup.numerics.precision == "single" else 16
    worst = 0
    for s in segs:
        ky, kx = s.counts
        # The folded spectra (two), the phase (float64) and two row temporaries …
        work = ky * kx * (4 * b + 8)
        # … and the padded field with its transform, or the half-transformed rows.
        work += 2 * b * s.padded[0] * s.padded[1] if s.padded else b * ky * samples[1]
        worst = max(worst, work)
    mem = worst + 2 * b * samples[0] * samples[1] + count * xs.size * 8
    if mem > memory_limit:
        raise SetupError(
            "screen.distance",
            f"the view along the beam needs about {mem / 2**30:.3g} GiB, over the "
            f"{memory_limit / 2**30:.3g} GiB limit; narrow the cut or lower the grid limit",
        )
    reasons.append(
        f"aperture sampled {samples[0]}×{samples[1]} at {axes[1].pitch * 1e6:.3g}×"
        f"{axes[0].pitch * 1e6:.3g} µm; {len(segs)} run(s) of distances, "
        f"{sum(s.route == 'fft' for s in segs)} by FFT"
    )
    if not resolved.all():
        reasons.append(
            f"{int((~resolved).sum())} of {count} distances need more frequencies than "
            f"a {max_grid}-sample grid holds; they show the frequencies it keeps"
        )
    return AlongZPlan(
        z=z,
        x=xs,
        y0=row,
        pitch=(axes[1].pitch, axes[0].pitch),
        samples=samples,
        half_width=half,
        lit_box=box,
        babinet=g.babinet,
        segments=segs,
        resolved=resolved,
        fresnel_number=fresnel,
        memory_bytes=int(mem),
        reasons=reasons,
    )


# --------------------------------------------------------------------------- the aperture


def _unboxed(t: np.ndarray) -> np.ndarray:
    """Point values of the transmittance from its pixel averages, to fourth order.

    An area-weighted pixel holds the transmittance averaged over the pixel, the
    convolution with the pixel box, whose transfer function sinc(f d) =
    1 − (π f d)²/6 + … damps the high frequencies that carry the edge waves. Its
    inverse to that order, t ≈ t̄ − (d²/24) t̄″, is the separable filter
    [−1, 26, −1]/24 (the box-filter/sinc pair: Goodman, Introduction to Fourier
    Optics, 3rd ed., §2.2; the series of 1/sinc: common practice, no source). It
    keeps the total transmission and needs one empty pixel around the lit region.
    """
    out = t * (26.0 / 24.0)
    out[:, 1:] -= t[:, :-1] / 24.0
    out[:, :-1] -= t[:, 1:] / 24.0
    res = out * (26.0 / 24.0)
    res[1:, :] -= out[:-1, :] / 24.0
    res[:-1, :] -= out[1:, :] / 24.0
    return res


def _aperture_field(
    setup: Setup, p: AlongZPlan, dtype
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The field leaving the aperture on its sample grid: ``(u, x, y)``.

    Two empty pixels surround the lit region (the filter needs one).
    """
    dy, dx = p.pitch
    ny, nx = p.samples
    x0, _, y0, _ = p.lit_box
    sx = x0 + (np.arange(nx) - 2) * dx
    sy = y0 + (np.arange(ny) - 2) * dy
    t = apertures.transmittance(setup.aperture, sx, sy, pitch=(dx, dy))
    if p.babinet:
        t = 1.0 - t
    u = sources.incident_field(setup.source, sx, sy) * _unboxed(t)
    f = setup.screen.lens_focal_length
    if f is not None:
        ly, lx = propagators.lens_phase(sx, sy, setup.source.wavelength, f)
        u = u * ly * lx
    return u.astype(dtype, copy=False), sx, sy


def _cycles(freqs: np.ndarray, coords: np.ndarray) -> np.ndarray:
    """f·x in cycles, reduced to [−½, ½] in double precision."""
    c = np.multiply.outer(np.asarray(freqs, np.float64), np.asarray(coords, np.float64))
    c -= np.rint(c)
    return c


def _turn(c: np.ndarray, sign: float, dtype) -> np.ndarray:
    return np.exp((sign * 2j * np.pi) * c).astype(dtype)


@dataclass
class _Folded:
    """The spectrum of one run folded onto |fx|, |fy| ≥ 0, ready for the row sums.

    H depends on fx² and fy² only, so ``Σ_fy B H = Σ_{|fy|} H(|fy|) [B(+fy) + B(−fy)]``
    with ``B = A e^{2πi fy y0}``; along x the signs stay apart for the transform
    onto x: ``plus`` holds +fx, ``minus`` −fx (zero at fx = 0, counted once). Both
    are weighted by Δx Δy Δfx Δfy. ``to_x[m, i] = e^{2πi |fx|_m (x_i − origin)}``.
    """

    plus: np.ndarray
    minus: np.ndarray
    fy: np.ndarray
    fx: np.ndarray
    step: tuple[float, float]
    to_x: np.ndarray
    w: np.ndarray = field(init=False)  # √(1/λ² − f²) − 1/λ, cycles/m
    decay: np.ndarray | None = field(init=False)  # √(f² − 1/λ²) where evanescent

    def set_wavelength(self, lam: float) -> None:
        f2 = self.fy[:, None] ** 2 + self.fx[None, :] ** 2
        arg = 1.0 / lam**2 - f2
        root = np.sqrt(np.abs(arg))
        # √(1/λ² − f²) − 1/λ = −f²/(√… + 1/λ), without cancellation.
        self.w = np.where(arg >= 0, -f2 / (root + 1.0 / lam), -1.0 / lam)
        self.decay = np.where(arg >= 0, 0.0, root) if (arg < 0).any() else None


def _halves(n: int) -> tuple[slice, slice, int]:
    """FFT indices of +m (m = 0 … (n+1)//2 − 1) and of −m (m = 1 … n//2), and n//2 + 1."""
    return slice(0, (n + 1) // 2), slice(n - 1, n - n // 2 - 1, -1), n // 2 + 1


def _fold_fft(u, sx, sy, seg: Segment, row: float, xs: np.ndarray) -> _Folded:
    """Fold the FFT of the zero-padded field (the origin at the first sample)."""
    ny, nx = seg.padded
    full = np.zeros((ny, nx), dtype=u.dtype)
    full[: u.shape[0], : u.shape[1]] = u
    spec = _fft.fft2(full, overwrite=True)
    del full
    spec *= 1.0 / (nx * ny)  # Δx Δy Δfx Δfy
    fy_signed = np.fft.fftfreq(ny, sy[1] - sy[0])
    spec *= _turn(_cycles(fy_signed, [row - sy[0]]), 1.0, u.dtype)
    py, my, ky = _halves(ny)
    folded = np.zeros((ky, nx), spec.dtype)
    folded[: py.stop] += spec[py]
    folded[1:ky] += spec[my]
    del spec
    px, mx, kx = _halves(nx)
    plus = np.zeros((ky, kx), folded.dtype)
    minus = np.zeros((ky, kx), folded.dtype)
    plus[:, : px.stop] = folded[:, px]
    minus[:, 1:kx] = folded[:, mx]
    dfy, dfx = seg.step
    fx = np.arange(kx) * dfx
    to_x = _turn(_cycles(fx, xs - sx[0]), 1.0, u.dtype)
    return _Folded(plus, minus, np.arange(ky) * dfy, fx, seg.step, to_x)


def _fold_matrix(u, sx, sy, seg: Segment, row: float, xs: np.ndarray) -> _Folded:
    """The folded spectrum at the run's frequencies by a matrix Fourier transform."""
    ky, kx = seg.counts
    dfy, dfx = seg.step
    fy, fx = np.arange(ky) * dfy, np.arange(kx) * dfx
    weight = (sx[1] - sx[0]) * (sy[1] - sy[0]) * dfx * dfy
    # Σ_j u e^{-2πi fy (y_j − y0)} over ±fy: 2 cos(2π fy (y_j − y0)), once at fy = 0.
    cos_y = np.cos(2.0 * np.pi * _cycles(fy, sy - row))
    cos_y[1:] *= 2.0
    rows = cos_y.astype(u.real.dtype) @ u  # (ky, nx)
    rows *= weight
    to_x = _turn(_cycles(fx, xs), 1.0, u.dtype)
    ex = _turn(_cycles(sx, fx), -1.0, u.dtype)  # (nx, kx): e^{−2πi fx x}
    plus = rows @ ex
    minus = rows @ ex.conj()
    minus[:, 0] = 0.0
    return _Folded(plus, minus, fy, fx, seg.step, to_x)


def _row(fs: _Folded, z: float, lam: float) -> np.ndarray:
    """The field on the cut at distance z, without the carrier exp(ikz)."""
    cdtype = fs.plus.dtype
    rdtype = np.float32 if cdtype == np.complex64 else np.float64
    dfy, dfx = fs.step
    # The band limit, and the end of the kept band, each rolled off smoothly.
    ux = min(_band_limit(dfx, lam, z), float(fs.fx[-1]))
    uy = min(_band_limit(dfy, lam, z), float(fs.fy[-1]))
    kx = int(np.searchsorted(fs.fx, ux, side="right"))
    ky = int(np.searchsorted(fs.fy, uy, side="right"))
    fy, fx = fs.fy[:ky], fs.fx[:kx]
    cyc = fs.w[:ky, :kx] * z
    cyc -= np.rint(cyc)  # whole cycles carry no phase
    phase = cyc.astype(rdtype)
    del cyc
    phase *= rdtype(2.0 * np.pi)
    h = np.empty(phase.shape, cdtype)
    np.cos(phase, out=h.real)  # cos and sin: several times faster than exp(iφ)
    np.sin(phase, out=h.imag)
    del phase
    if fs.decay is not None:  # evanescent waves decay
        h *= np.exp(-2.0 * np.pi * z * fs.decay[:ky, :kx]).astype(rdtype)
    h *= propagators._band_window(fy, uy, lam, ROLLOFF).astype(rdtype)[:, None]
    win_x = propagators._band_window(fx, ux, lam, ROLLOFF).astype(rdtype)
    prod = np.multiply(h, fs.plus[:ky, :kx])
    s_plus = prod.sum(axis=0) * win_x
    np.multiply(h, fs.minus[:ky, :kx], out=prod)
    s_minus = prod.sum(axis=0) * win_x
    to_x = fs.to_x[:kx]
    return s_plus @ to_x + s_minus @ to_x.conj()


# --------------------------------------------------------------------------- entry point


def along_z(
    setup: Setup,
    *,
    z_min: float | None = None,
    z_max: float | None = None,
    count: int = DEFAULT_COUNT,
    y0: float | None = None,
    x: np.ndarray | None = None,
    max_grid: int = DEFAULT_MAX_GRID,
    memory_limit: int = DEFAULT_MEMORY_LIMIT,
    progress: Callable[[int, int], None] | None = None,
    cancel: Callable[[], bool] | None = None,
) -> AlongZ:
    """Irradiance along the cut y = y0 at ``count`` distances on a log grid, as an x–z image.

    Parameters
    ----------
    setup
        The bench; its screen distance is not used, its window gives the default cut.
    z_min, z_max
        Nearest and farthest distance, m; by default half the size D of the lit
        region and ten times the Fraunhofer distance 2D²/λ.
    count
        Number of distances, geometrically spaced.
    y0
        Height of the cut, m; the screen window's centre by default.
    x
        Positions along the cut, m, increasing; the screen's pixel centres by default.
    max_grid
        Largest FFT grid and largest number of frequencies kept, samples per side.
    memory_limit
        Largest estimated working memory, bytes.
    progress
        Called as ``progress(done, total)`` after each distance.
    cancel
        Called between distances; when it returns true, :class:`compute.sweep.Cancelled`
        is raised.

    Returns
    -------
    AlongZ
        The image, its axes, the Fresnel number at each distance, the regime
        boundaries at N_F = 10 and N_F = 0.1, and which rows keep every frequency.

    Raises
    ------
    SetupError
        As :func:`plan_along_z`.

    References
    ----------
    Goodman, *Introduction to Fourier Optics*, 3rd ed., §3.10; Matsushima and
    Shimobaba, Opt. Express 17, 19662 (2009); Soummer et al., Opt. Express 15,
    15935 (2007).
    """
    t0 = time.perf_counter()
    p = plan_along_z(
        setup,
        z_min=z_min,
        z_max=z_max,
        count=count,
        y0=y0,
        x=x,
        max_grid=max_grid,
        memory_limit=memory_limit,
    )
    lam = setup.source.wavelength
    f = setup.screen.lens_focal_length
    z, xs, row = p.z, p.x, p.y0
    field_rows = np.zeros((z.size, xs.size), dtype=np.complex128)
    done = 0
    if p.lit_box is not None:
        cdtype = np.complex64 if setup.numerics.precision == "single" else np.complex128
        u, sx, sy = _aperture_field(setup, p, cdtype)
        for seg in p.segments:
            if cancel is not None and cancel():
                raise Cancelled()
            fold = _fold_fft if seg.route == "fft" else _fold_matrix
            fs = fold(u, sx, sy, seg, row, xs)
            fs.set_wavelength(lam)
            for k in range(seg.start, seg.stop):
                if cancel is not None and cancel():
                    raise Cancelled()
                zk = float(z[k])
                carrier = np.exp(1j * ((2.0 * np.pi * zk / lam) % (2.0 * np.pi)))
                field_rows[k] = np.asarray(_row(fs, zk, lam), np.complex128) * carrier
                done += 1
                if progress is not None:
                    progress(done, z.size)
            del fs
    if p.babinet:
        # Only the complement of the obstacles was propagated: add the free beam.
        for k, zk in enumerate(z):
            free = sources.free_field(
                setup.source, xs, np.array([row]), float(zk), lens_focal_length=f, paraxial=False
            )[0]
            field_rows[k] = free - field_rows[k]
    hi, lo_nf = FRESNEL_ZONE_LIMITS
    a2 = p.half_width**2
    size = 2.0 * p.half_width
    return AlongZ(
        z=z,
        x=xs,
        y0=row,
        intensity=field_rows.real**2 + field_rows.imag**2,
        fresnel_number=p.fresnel_number,
        boundaries=[
            Boundary("near field | Fresnel zone", hi, a2 / (lam * hi)),
            Boundary("Fresnel zone | Fraunhofer zone", lo_nf, a2 / (lam * lo_nf)),
        ],
        fraunhofer_distance=2.0 * size**2 / lam,
        resolved=p.resolved,
        plan=p,
        elapsed_s=time.perf_counter() - t0,
    )
