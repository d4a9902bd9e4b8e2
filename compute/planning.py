"""Choosing the method, grid, pitch and padding for a setup; the validity report.

The planner reads the geometry of a setup — the region of the aperture plane
that carries light, the screen window, the distance, a lens — and decides how
to compute the screen field so that the sampling holds the stated accuracy
from the near field to the far field. It records why, estimates the memory
before anything is allocated, and reports what each approximation drops.

Quantities of the report (all SI):

* Fresnel number N_F = a²/(λz), a the half-width of the lit region
  (Goodman §4.5.1);
* Fraunhofer distance 2D²/λ, D its full size (common practice; Born & Wolf
  §8.3.3 give the condition on the neglected quadratic phase);
* the largest quadratic phase π ρ²/(λz) across the aperture that the
  Fraunhofer form drops (Goodman §4.3, eq. 4-24);
* the largest quartic phase π ρ⁴/(4λz³) of the distance expansion that the
  paraxial Fresnel form drops, ρ the largest lateral separation between an
  aperture point and a screen point (Goodman §4.2, eq. 4-18);
* the largest angle on the screen, and the sampling margins of the grid.

References
----------
.. [G] J. W. Goodman, *Introduction to Fourier Optics*, 3rd ed. (2005), §4.2, §4.3, §4.5.
.. [V] D. G. Voelz, *Computational Fourier Optics*, SPIE (2011), §5.1.
.. [MS] K. Matsushima and T. Shimobaba, Opt. Express 17, 19662 (2009).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from . import apertures, sources
from .errors import SetupError
from .fft import next_fast_len
from .model import Setup

__all__ = [
    "DEFAULT_MEMORY_LIMIT",
    "DEFAULT_TIME_BUDGET",
    "Plan",
    "ValidityItem",
    "alternatives",
    "plan",
    "screen_axes",
]

DEFAULT_MEMORY_LIMIT = 2 * 1024**3
# Longest estimated propagation, s, that `auto` accepts for a method (see `_route_seconds`).
DEFAULT_TIME_BUDGET = 20.0

# Accuracy targets of `auto` (rad of neglected phase); the report's limits are looser.
AUTO_FRAUNHOFER_PHASE = 0.1
AUTO_PARAXIAL_PHASE = 0.1
# Report limits: ok below the first, marginal below the second.
FRAUNHOFER_PHASE_LIMITS = (math.pi / 8, math.pi / 2)
PARAXIAL_PHASE_LIMITS = (math.pi / 8, math.pi)
ANGLE_LIMITS = (math.radians(30.0), math.radians(60.0))

OVERSAMPLE = 2.0  # samples per period of the highest needed spatial frequency, over Nyquist
# The single-transform routes sample the chirp of the Fresnel integral itself; curved
# edges off the pixel grid leave a midpoint-rule error that needs the finer pitch.
OVERSAMPLE_TRANSFORM = 4.0
SAMPLES_PER_FEATURE = 6.0
MIN_SAMPLES_ACROSS = 64
MAX_DIRECT_PAIRS = 2.0e9  # aperture samples × screen points for direct integration
TAPER_FRESNEL_SCALES = 4.0  # margin and taper of an unbounded aperture, in √(λz)
KERNEL_REACH_FRESNEL_SCALES = 4.0  # convolution kernels reach this far beyond the window

METHODS = ("fraunhofer", "fresnel", "angular_spectrum", "rayleigh_sommerfeld")


@dataclass
class ValidityItem:
    """One line of the validity report."""

    key: str
    label: str
    value: float
    limit: float
    unit: str
    verdict: str  # 'ok' | 'marginal' | 'invalid'
    sentence: str

    def to_dict(self) -> dict:
        d = asdict(self)
        for k in ("value", "limit"):
            v = d[k]
            d[k] = None if v is None or not math.isfinite(v) else float(v)
        return d


@dataclass
class Plan:
    """How a setup is computed, and why.

    ``nx, ny, dx, dy`` describe the aperture grid; ``padded`` the FFT size for
    the convolution methods (the grid itself for the others).
    """

    method: str
    variant: str
    nx: int
    ny: int
    dx: float
    dy: float
    padded: tuple[int, int]
    reasons: list[str]
    memory_bytes: int
    fresnel_number: float
    validity: list[ValidityItem] = field(default_factory=list)
    # Geometry the engine needs; not part of the report.
    grid_centre: tuple[float, float] = (0.0, 0.0)
    lit_box: tuple[float, float, float, float] | None = None
    taper: tuple[float, float, float, float] | None = None  # taper widths (x0, x1, y0, y1)
    babinet: bool = False
    dtype: str = "complex64"
    output: str = "grid"  # 'grid' (slice the FFT grid), 'points' (matrix transform)
    step: tuple[int, int] = (1, 1)  # FFT-grid samples per screen pixel (x, y)
    seconds: float = 0.0  # estimated propagation time on the reference machine
    # A grid sized by the power that reaches the window: the band (x, y) it carries,
    # cycles/m, beyond which the kernel rolls off (inf on an axis sized by geometry).
    band: tuple[float, float] | None = None

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "variant": self.variant,
            "grid": [self.ny, self.nx],
            "pitch": [self.dy, self.dx],
            "padded": list(self.padded),
            "reasons": list(self.reasons),
            "memory_bytes": int(self.memory_bytes),
            "fresnel_number": float(self.fresnel_number),
            "verdict": self.verdict,
            "validity": [v.to_dict() for v in self.validity],
        }

    @property
    def worst(self) -> str:
        order = {"ok": 0, "marginal": 1, "invalid": 2}
        return max((v.verdict for v in self.validity), key=order.get, default="ok")

    @property
    def verdict(self) -> str:
        """The verdict of the whole result: the worst item of its report.

        ``'invalid'`` means that at least one item of the report is invalid. For
        ``auto`` that happens only when no method is valid within the memory and
        time budget (see :func:`plan`); the dashboard, ``check`` and ``render``
        show it, and ``render --strict`` refuses to write such a result.
        """
        return self.worst


def screen_axes(setup: Setup) -> tuple[np.ndarray, np.ndarray]:
    """Screen pixel centres (x, y), m: the window split into equal pixels."""
    s = setup.screen
    ny, nx = s.shape_px()
    dxs = s.width / nx
    dys = s.height / ny
    x = s.x - s.width / 2 + (np.arange(nx) + 0.5) * dxs
    y = s.y - s.height / 2 + (np.arange(ny) + 0.5) * dys
    return x, y


# --------------------------------------------------------------------------- geometry


@dataclass
class _Geometry:
    lam: float
    z: float
    f: float | None
    lit: tuple[float, float, float, float] | None  # x0, x1, y0, y1 (finite)
    unbounded: tuple[bool, bool, bool, bool]
    screen: tuple[float, float, float, float]
    dxs: float
    dys: float
    feature: float
    babinet: bool
    empty: bool


def _finite_box(box):
    return box is not None and all(math.isfinite(v) for v in box)


def _geometry(setup: Setup) -> _Geometry:
    src, ap, sc = setup.source, setup.aperture, setup.screen
    lam, z = src.wavelength, sc.distance
    f = sc.lens_focal_length
    ny, nx = sc.shape_px()
    screen = (sc.x - sc.width / 2, sc.x + sc.width / 2, sc.y - sc.height / 2, sc.y + sc.height / 2)
    box = apertures.aperture_bounds(ap)
    babinet = ap.background == "clear"
    empty = box is None
    if box is None:
        box = (-math.inf, math.inf, -math.inf, math.inf) if not babinet else None
    if babinet and box is not None and not _finite_box(box):
        # An unbounded element on a clear background: no compact complement,
        # compute the whole field on a tapered window instead.
        babinet = False
        box = (-math.inf, math.inf, -math.inf, math.inf)
    src_box = sources.source_extent(src)
    if box is not None and src_box is not None:
        box = (
            max(box[0], src_box[0]),
            min(box[1], src_box[1]),
            max(box[2], src_box[2]),
            min(box[3], src_box[3]),
        )
        if box[0] >= box[1] or box[2] >= box[3]:
            box = None
            empty = True
    unbounded = (False,) * 4
    if box is not None and not _finite_box(box):
        unbounded = tuple(not math.isfinite(v) for v in box)
        # Lit region that matters: the screen window traced back along the beam,
        # widened by several Fresnel zones; beyond it the aperture is tapered.
        alpha, beta, _ = sources.direction_cosines(src)
        zf = abs(z) if f is None else min(abs(z), abs(f))
        margin = TAPER_FRESNEL_SCALES * math.sqrt(lam * zf)
        win = (
            screen[0] - z * alpha - margin,
            screen[1] - z * alpha + margin,
            screen[2] - z * beta - margin,
            screen[3] - z * beta + margin,
        )
        box = (
            win[0] if unbounded[0] else max(box[0], win[0] - margin),
            win[1] if unbounded[1] else min(box[1], win[1] + margin),
            win[2] if unbounded[2] else max(box[2], win[2] - margin),
            win[3] if unbounded[3] else min(box[3], win[3] + margin),
        )
        if box[0] >= box[1] or box[2] >= box[3]:
            box = None
            empty = True
    feature = apertures.smallest_feature(ap)
    return _Geometry(
        lam=lam,
        z=z,
        f=f,
        lit=box,
        unbounded=unbounded,
        screen=screen,
        dxs=sc.width / nx,
        dys=sc.height / ny,
        feature=feature,
        babinet=babinet,
        empty=empty,
    )


def _taper_width(g: _Geometry) -> float:
    zf = abs(g.z) if g.f is None else min(abs(g.z), abs(g.f))
    return TAPER_FRESNEL_SCALES * math.sqrt(g.lam * zf)


def _lit_with_taper(g: _Geometry) -> tuple[float, float, float, float]:
    """The lit box including the tapers on its unbounded sides."""
    t = _taper_width(g)
    x0, x1, y0, y1 = g.lit
    u = g.unbounded
    return (x0 - t * u[0], x1 + t * u[1], y0 - t * u[2], y1 + t * u[3])


def _max_sep(a: tuple[float, float], b: tuple[float, float]) -> float:
    """Largest |p − q| for p in interval a and q in interval b."""
    return max(abs(a[1] - b[0]), abs(b[1] - a[0]))


def _abs_max(a: tuple[float, float]) -> float:
    return max(abs(a[0]), abs(a[1]))


# --------------------------------------------------------------------------- method choice


def _phases(g: _Geometry, box) -> dict:
    """The neglected phases and the regime numbers at this geometry."""
    lam, z = g.lam, g.z
    half = 0.5 * max(box[1] - box[0], box[3] - box[2])
    size = 2.0 * half
    rho_ap = math.hypot(_abs_max(box[:2]), _abs_max(box[2:]))
    rho_centre = 0.5 * math.hypot(box[1] - box[0], box[3] - box[2])
    inv_eff = abs(1.0 / z - (1.0 / g.f if g.f else 0.0))
    rho_sep = math.hypot(_max_sep(box[:2], g.screen[:2]), _max_sep(box[2:], g.screen[2:]))
    return {
        "paraxial_phase": _quartic_phase(box, g.screen, lam, z),
        "half": half,
        "size": size,
        "fresnel_number": half**2 / (lam * z),
        "fraunhofer_distance": 2.0 * size**2 / lam,
        "fraunhofer_phase": math.pi * rho_ap**2 * inv_eff / lam,
        # The same phase about the centre of the lit region: what the non-paraxial far
        # field (expanded about that centre) drops.
        "far_field_phase": math.pi * rho_centre**2 * inv_eff / lam,
        "max_angle": math.atan2(rho_sep, z),
        "rho_sep": rho_sep,
    }


def _quartic_phase(box, screen, lam: float, z: float) -> float:
    """Largest spread across the aperture of the quartic term the Fresnel form drops.

    The distance expansion r ≈ z + d²/(2z) − d⁴/(8z³), d the lateral separation,
    drops k d⁴/(8z³) (Goodman §4.2, eq. 4-18). Only its variation across the
    aperture changes the pattern — a part common to all aperture points is a
    phase of the screen pixel — so the report takes, for each screen point, the
    range of the term over the aperture, and the largest such range.
    """
    sx = np.linspace(screen[0], screen[1], 5)
    sy = np.linspace(screen[2], screen[3], 5)
    ax = np.linspace(box[0], box[1], 5)
    ay = np.linspace(box[2], box[3], 5)
    px, py = np.meshgrid(sx, sy, indexing="ij")
    qx, qy = np.meshgrid(ax, ay, indexing="ij")
    d2 = (px.ravel()[:, None] - qx.ravel()[None, :]) ** 2 + (
        py.ravel()[:, None] - qy.ravel()[None, :]
    ) ** 2
    spread = np.max(np.ptp(d2 * d2, axis=1))
    return float(math.pi * spread / (4.0 * lam * z**3))


def _auto_method(g: _Geometry, ph: dict, reasons: list[str]) -> str:
    if (
        g.f is None
        and not any(g.unbounded)
        and ph["far_field_phase"] <= AUTO_FRAUNHOFER_PHASE
        and (
            ph["paraxial_phase"] > AUTO_PARAXIAL_PHASE
            or ph["fraunhofer_phase"] > AUTO_FRAUNHOFER_PHASE
        )
    ):
        why = (
            f"the paraxial form would drop {ph['paraxial_phase']:.3g} rad"
            if ph["paraxial_phase"] > AUTO_PARAXIAL_PHASE
            else f"the aperture is off axis (the paraxial far field about the axis would drop "
            f"{ph['fraunhofer_phase']:.3g} rad)"
        )
        reasons.append(
            f"far field: the phase of second order across the aperture about its centre is "
            f"{ph['far_field_phase']:.3g} rad ≤ {AUTO_FRAUNHOFER_PHASE} rad, but {why}, so the "
            "non-paraxial Rayleigh–Sommerfeld far field is used at each pixel's direction"
        )
        return "far_field"
    if g.f is None and ph["fraunhofer_phase"] <= AUTO_FRAUNHOFER_PHASE:
        reasons.append(
            f"far field: the quadratic phase across the aperture is "
            f"{ph['fraunhofer_phase']:.3g} rad ≤ {AUTO_FRAUNHOFER_PHASE} rad, so the "
            f"Fraunhofer transform is exact to the stated accuracy"
        )
        return "fraunhofer"
    if g.f is not None and ph["fraunhofer_phase"] <= AUTO_FRAUNHOFER_PHASE:
        reasons.append(
            "screen in the lens's back focal plane: the lens makes the far field "
            "there, computed as an exact Fourier transform"
        )
        return "fraunhofer"
    if ph["paraxial_phase"] <= AUTO_PARAXIAL_PHASE:
        reasons.append(
            f"Fresnel zone: the paraxial phase error is {ph['paraxial_phase']:.3g} rad "
            f"≤ {AUTO_PARAXIAL_PHASE} rad, while Fraunhofer would drop "
            f"{ph['fraunhofer_phase']:.3g} rad"
        )
        return "fresnel"
    reasons.append(
        f"near field: the paraxial form would drop {ph['paraxial_phase']:.3g} rad, so "
        "the exact (non-paraxial) band-limited angular spectrum is used"
    )
    return "angular_spectrum"


# --------------------------------------------------------------------------- grids


def _needed_frequency(g: _Geometry, box, src, *, paraxial_out: bool, axis: int) -> float:
    """Highest spatial frequency the aperture samples must carry along one axis."""
    lam, z = g.lam, g.z
    a = box[2 * axis : 2 * axis + 2]
    s = g.screen[2 * axis : 2 * axis + 2]
    ftx, fty = sources.local_frequency(src, _abs_max(box[:2]), _abs_max(box[2:]))
    f_src = (ftx, fty)[axis]
    lens = _abs_max(a) / (lam * abs(g.f)) if g.f else 0.0
    if paraxial_out:
        # Fourier-transform route: output frequency x/(λz) plus the input chirp.
        inv = abs(1.0 / z - (1.0 / g.f if g.f else 0.0))
        return _abs_max(s) / (lam * z) + _abs_max(a) * inv / lam + f_src
    sep = _max_sep(a, s)
    return min(1.0 / lam, sep / math.hypot(sep, z) / lam + lens + f_src)


def _fraction_pitch(g: _Geometry, extent: float) -> float:
    p = extent / MIN_SAMPLES_ACROSS
    if math.isfinite(g.feature):
        p = min(p, g.feature / SAMPLES_PER_FEATURE)
    return p


MAX_SAMPLES_PER_SIDE = 1 << 20
KERNEL_BUILD_BYTES = 16  # per grid sample while a kernel is built, measured with tracemalloc


def _count(span: float, pitch: float, path: str, extra: int = 0) -> int:
    """Samples of ``pitch`` across ``span``, refused when absurdly many."""
    n = span / pitch if pitch > 0 else math.inf
    if not math.isfinite(n) or n > MAX_SAMPLES_PER_SIDE:
        raise SetupError(
            path,
            f"the grid would need {n:.3g} samples per side (at most {MAX_SAMPLES_PER_SIDE}); "
            "the sizes of the aperture and the screen window are too far apart",
        )
    return max(2, math.ceil(n)) + extra


def _bytes_per(dtype: str) -> int:
    return 8 if dtype == "complex64" else 16


def _plan_transform_route(g, box, src, setup, dtype, reasons, method, variant):
    """Grid for the single-transform methods (Fraunhofer, Fresnel impulse response)."""
    user = setup.numerics.grid
    w, h = box[1] - box[0], box[3] - box[2]
    if user:
        nx = ny = user
        dx, dy = w / (nx - 2), h / (ny - 2)
        reasons.append(f"grid of {user}×{user} set by the user over the lit region")
    else:
        f_x = _needed_frequency(g, box, src, paraxial_out=True, axis=0)
        f_y = _needed_frequency(g, box, src, paraxial_out=True, axis=1)
        q = OVERSAMPLE_TRANSFORM
        dx = min(_fraction_pitch(g, w), 1.0 / (2.0 * q * f_x) if f_x else math.inf)
        dy = min(_fraction_pitch(g, h), 1.0 / (2.0 * q * f_y) if f_y else math.inf)
        nx = _count(w, dx, "aperture.elements")
        ny = _count(h, dy, "aperture.elements")
        dx, dy = w / nx, h / ny  # pixel edges on the box edges
        nx, ny = nx + 2, ny + 2  # an empty pixel on each side for the edge correction
        reasons.append(
            f"aperture grid {ny}×{nx} at {length_text(dy)} × {length_text(dx)}: resolves the "
            f"smallest feature and the highest screen frequency with {q:g}× margin"
        )
    sny, snx = setup.screen.shape_px()
    b = _bytes_per(dtype)
    mem = b * (3 * nx * ny + nx * snx + ny * sny + 2 * ny * snx + 3 * sny * snx)
    centre = (0.5 * (box[0] + box[1]), 0.5 * (box[2] + box[3]))
    return method, variant, nx, ny, dx, dy, (ny, nx), mem, centre, "points", (1, 1)


def _plan_convolution_route(g, box, src, setup, dtype, reasons, method, variant, need=None):
    """Grid for the FFT convolution methods (angular spectrum, Fresnel transfer function).

    The window holds the lit region and the screen window; it is zero-padded to
    twice that so the circular convolution of the FFT equals the linear one.
    The pitch divides the screen pixel pitch, and the grid is placed so that
    screen pixel centres fall on grid samples: the screen is read off the
    inverse FFT without interpolation. ``need``, when given, is the highest
    spatial frequency (x, y) to carry in place of the steepest geometric angle;
    the kernel then has to reach only as far as light of the grid's band travels.
    """
    user = setup.numerics.grid
    s = g.screen
    ux0, ux1 = min(box[0], s[0]), max(box[1], s[1])
    uy0, uy1 = min(box[2], s[2]), max(box[3], s[3])
    lx, ly = ux1 - ux0, uy1 - uy0
    # The band-limited kernel reaches λ z u_limit ≈ L/2 from each point; it must
    # span the largest aperture-to-screen separation plus several Fresnel zones,
    # or the ringing of its cut-off reaches the window. 2.5 rather than 2: the top
    # fifth of the band is rolled off.
    reach = math.sqrt(g.lam * abs(g.z)) * KERNEL_REACH_FRESNEL_SCALES
    sep_x, sep_y = _max_sep(box[:2], s[:2]), _max_sep(box[2:], s[2:])
    if need is not None:
        sep_x = min(sep_x, _travel(g, OVERSAMPLE * need[0]))
        sep_y = min(sep_y, _travel(g, OVERSAMPLE * need[1]))
    span_x = max(2.0 * lx, 2.5 * (sep_x + reach))
    span_y = max(2.0 * ly, 2.5 * (sep_y + reach))
    if user:
        big_x = big_y = user
        dx, dy = span_x / user, span_y / user
        mx = my = 0
        reasons.append(f"FFT grid {user}×{user} set by the user over twice the window")
    else:
        if need is None:
            f_x = _needed_frequency(g, box, src, paraxial_out=False, axis=0)
            f_y = _needed_frequency(g, box, src, paraxial_out=False, axis=1)
        else:
            f_x, f_y = need
        px = min(_fraction_pitch(g, box[1] - box[0]), 1.0 / (2.0 * OVERSAMPLE * f_x))
        py = min(_fraction_pitch(g, box[3] - box[2]), 1.0 / (2.0 * OVERSAMPLE * f_y))
        mx = _count(g.dxs, px, "screen.samples") if g.dxs > px else 1
        my = _count(g.dys, py, "screen.samples") if g.dys > py else 1
        dx, dy = g.dxs / mx, g.dys / my
        big_x = next_fast_len(_count(span_x, dx, "screen.width", 4))
        big_y = next_fast_len(_count(span_y, dy, "screen.height", 4))
        reasons.append(
            f"FFT grid {big_y}×{big_x} at {length_text(dy)} × {length_text(dx)} "
            f"({my}×{mx} samples per screen pixel): holds the lit region and the screen "
            f"window twice over, and the steepest needed angle with {OVERSAMPLE:g}× margin"
        )
    sny, snx = setup.screen.shape_px()
    b = _bytes_per(dtype)
    # The padded field (transformed in place), the cached kernel, and the peak of
    # building the kernel once.
    mem = (2 * b + max(KERNEL_BUILD_BYTES, 3 * b // 2)) * big_x * big_y + 8 * snx * sny * 4
    if not user:
        # Centre the grid on a screen pixel nearest the middle of the union.
        xs, ys = screen_axes(setup)
        cx_mid = 0.5 * (ux0 + ux1)
        cy_mid = 0.5 * (uy0 + uy1)
        cx = xs[0] + round((cx_mid - xs[0]) / dx) * dx
        cy = ys[0] + round((cy_mid - ys[0]) / dy) * dy
        output, step = "grid", (mx, my)
    else:
        cx, cy = 0.5 * (ux0 + ux1), 0.5 * (uy0 + uy1)
        output, step = "points", (1, 1)
        mem += b * (big_x * big_y + big_x * snx + big_y * sny)
    n_ap_x = max(2, math.ceil((box[1] - box[0]) / dx) + 2)
    n_ap_y = max(2, math.ceil((box[3] - box[2]) / dy) + 2)
    return method, variant, n_ap_x, n_ap_y, dx, dy, (big_y, big_x), mem, (cx, cy), output, step


def _travel(g: _Geometry, f: float) -> float:
    """Lateral distance light of spatial frequency ``f`` travels over the distance, m."""
    sin = min(g.lam * f, 0.999)
    return abs(g.z) * sin / math.sqrt(1.0 - sin * sin)


def _plan_direct_route(g, box, src, setup, dtype, reasons):
    user = setup.numerics.grid
    w, h = box[1] - box[0], box[3] - box[2]
    if user:
        nx = ny = user
    else:
        f_x = _needed_frequency(g, box, src, paraxial_out=False, axis=0)
        f_y = _needed_frequency(g, box, src, paraxial_out=False, axis=1)
        px = min(_fraction_pitch(g, w), 1.0 / (2.0 * OVERSAMPLE_TRANSFORM * f_x))
        py = min(_fraction_pitch(g, h), 1.0 / (2.0 * OVERSAMPLE_TRANSFORM * f_y))
        nx, ny = _count(w, px, "aperture.elements"), _count(h, py, "aperture.elements")
    dx, dy = w / nx, h / ny
    if not user:
        nx, ny = nx + 2, ny + 2  # an empty pixel on each side for the edge correction
    sny, snx = setup.screen.shape_px()
    pairs = float(nx * ny) * snx * sny
    if pairs > MAX_DIRECT_PAIRS:
        raise SetupError(
            "numerics.method",
            f"direct Rayleigh–Sommerfeld integration would sum {pairs:.2g} sample pairs "
            f"(aperture {ny}×{nx} × screen {sny}×{snx}), over the {MAX_DIRECT_PAIRS:.0e} "
            "limit; lower screen.samples, narrow the window, or choose another method",
        )
    reasons.append(
        f"direct Rayleigh–Sommerfeld sum over {ny}×{nx} aperture samples at every one of "
        f"{sny}×{snx} screen pixels"
    )
    # The aperture samples, one chunk of at most 4e6 sample pairs, the screen.
    mem = 16 * (3 * nx * ny + 3 * min(4_000_000, pairs) + snx * sny * 2)
    centre = (0.5 * (box[0] + box[1]), 0.5 * (box[2] + box[3]))
    return (
        "rayleigh_sommerfeld",
        "direct",
        nx,
        ny,
        dx,
        dy,
        (ny, nx),
        mem,
        centre,
        "points",
        (1, 1),
    )


def _plan_far_field_route(g, box, src, setup, dtype, reasons):
    """Grid for the non-paraxial Rayleigh–Sommerfeld far field (a non-uniform FFT).

    The samples resolve the smallest feature and the phase exp(−2πi α ξ/λ) of the
    steepest direction cosine α that reaches the window, with the margin of the
    single-transform routes.
    """
    user = setup.numerics.grid
    w, h = box[1] - box[0], box[3] - box[2]
    if user:
        nx = ny = user
        dx, dy = w / (nx - 2), h / (ny - 2)
        reasons.append(f"grid of {user}×{user} set by the user over the lit region")
    else:
        f_x = _needed_frequency(g, box, src, paraxial_out=False, axis=0)
        f_y = _needed_frequency(g, box, src, paraxial_out=False, axis=1)
        q = OVERSAMPLE_TRANSFORM
        dx = min(_fraction_pitch(g, w), 1.0 / (2.0 * q * f_x) if f_x else math.inf)
        dy = min(_fraction_pitch(g, h), 1.0 / (2.0 * q * f_y) if f_y else math.inf)
        nx = _count(w, dx, "aperture.elements")
        ny = _count(h, dy, "aperture.elements")
        dx, dy = w / nx, h / ny
        nx, ny = nx + 2, ny + 2
        reasons.append(
            f"aperture grid {ny}×{nx} at {length_text(dy)} × {length_text(dx)}: resolves the "
            f"smallest feature and the steepest direction to the window with {q:g}× margin"
        )
    sny, snx = setup.screen.shape_px()
    b = _bytes_per(dtype)
    # The aperture samples, the non-uniform FFT's grid (twice oversampled per axis),
    # the per-chunk coordinates (float64) and the complex128 screen with its irradiance.
    chunk = min(snx * sny, 1 << 20)
    mem = b * 5 * nx * ny + 8 * 10 * chunk + 24 * snx * sny
    centre = (0.5 * (box[0] + box[1]), 0.5 * (box[2] + box[3]))
    return (
        "rayleigh_sommerfeld",
        "far_field_nonparaxial",
        nx,
        ny,
        dx,
        dy,
        (ny, nx),
        mem,
        centre,
        "points",
        (1, 1),
    )


def _method_route(g, box, src, setup, dtype, reasons, method):
    """The grid route of one method: ``method`` is a name of :data:`METHODS` or ``far_field``."""
    if method == "fraunhofer":
        variant = "lens_focal_plane" if g.f is not None else "far_field"
        return _plan_transform_route(g, box, src, setup, dtype, reasons, method, variant)
    if method == "far_field":
        return _plan_far_field_route(g, box, src, setup, dtype, reasons)
    if method == "fresnel_impulse_response":
        reasons.append(
            "Fresnel impulse-response form onto the screen pixels (its grid does not grow "
            "with the distance)"
        )
        return _plan_transform_route(
            g, box, src, setup, dtype, reasons, "fresnel", "impulse_response"
        )
    if method == "fresnel":
        # Voelz's criterion: the transfer function suits short distances (pitch ≥ λz/L),
        # the impulse response long ones.
        trial = _plan_convolution_route(g, box, src, setup, dtype, [], method, "transfer_function")
        dx_t, big_x = trial[4], trial[6][1]
        if dx_t * dx_t * big_x >= g.lam * g.z:
            reasons.append(
                f"Fresnel transfer-function form: pitch {length_text(dx_t)} ≥ λz/L = "
                f"{length_text(g.lam * g.z / (dx_t * big_x))} (short distance)"
            )
            return _plan_convolution_route(
                g, box, src, setup, dtype, reasons, method, "transfer_function"
            )
        reasons.append(
            "Fresnel impulse-response form onto the screen pixels: the pitch is below "
            "λz/L (long distance)"
        )
        return _plan_transform_route(g, box, src, setup, dtype, reasons, method, "impulse_response")
    if method == "angular_spectrum":
        return _plan_convolution_route(g, box, src, setup, dtype, reasons, method, "band_limited")
    return _plan_direct_route(g, box, src, setup, dtype, reasons)


# --------------------------------------------------------------------------- time estimate

# Rates of the development machine (2 shared cores, numpy with OpenBLAS, pyFFTW and
# finufft), measured with `fringebench bench`-style runs; a rough guide for choosing
# among methods, not a promise.
SECONDS_PER_DIRECT_PAIR = 7e-8  # one aperture sample at one screen point, direct sum
SECONDS_PER_MAC = 2e-9  # one complex multiply-add of a matrix Fourier transform
SECONDS_PER_EXP = 2e-8  # one complex exponential of a kernel
SECONDS_PER_FFT_SAMPLE_LOG = 4e-9  # per sample and per log2 of the size, one FFT
SECONDS_PER_NUFFT_POINT = 6e-7  # one screen pixel of the non-uniform far field
SECONDS_PER_APERTURE_SAMPLE = 2e-7  # sampling the transmittance and the incident field
SECONDS_FIXED = 0.02


def _route_seconds(route, setup: Setup) -> float:
    """Estimated time of a route, s: sampling the aperture and propagating (rates above)."""
    nx, ny = route[2], route[3]
    sny, snx = setup.screen.shape_px()
    n_ap = float(nx) * ny
    return SECONDS_PER_APERTURE_SAMPLE * n_ap + _propagation_seconds(route, snx, sny, n_ap)


def _propagation_seconds(route, snx: int, sny: int, n_ap: float) -> float:
    method, variant, nx, ny, _dx, _dy, padded, _mem, _centre, output, _step = route
    if variant == "direct":
        return SECONDS_FIXED + SECONDS_PER_DIRECT_PAIR * n_ap * snx * sny
    if variant == "far_field_nonparaxial":
        grid = 4.0 * n_ap
        return (
            SECONDS_FIXED
            + SECONDS_PER_NUFFT_POINT * snx * sny
            + SECONDS_PER_FFT_SAMPLE_LOG * grid * math.log2(max(grid, 2.0))
            + SECONDS_PER_EXP * n_ap
        )
    if method in ("angular_spectrum",) or variant == "transfer_function":
        big = float(padded[0]) * padded[1]
        t = big * (SECONDS_PER_EXP + 2.0 * SECONDS_PER_FFT_SAMPLE_LOG * math.log2(max(big, 2.0)))
        if output == "points":
            t += SECONDS_PER_MAC * (big * snx + padded[0] * sny * snx)
        return SECONDS_FIXED + t
    macs = min(ny * nx * snx + sny * ny * snx, sny * ny * nx + sny * nx * snx)
    return SECONDS_FIXED + SECONDS_PER_MAC * macs + SECONDS_PER_EXP * (nx * snx + ny * sny + n_ap)


# --------------------------------------------------------------------------- the rule

# Report items that every method shares (the same value and verdict whatever the
# method): they cannot make one method better than another.
SHARED_ITEMS = ("max_angle", "screen_sampling")
_LEVEL = {"ok": 0, "marginal": 1, "invalid": 2}
# Candidates of `auto`, in the order of the Plan's methods.
_CANDIDATES = (
    "fraunhofer",
    "far_field",
    "fresnel",
    "fresnel_impulse_response",
    "angular_spectrum",
    "rayleigh_sommerfeld",
)


@dataclass
class _Candidate:
    key: str
    route: tuple
    reasons: list[str]
    items: list[ValidityItem]
    seconds: float
    # A power-sized angular spectrum (see `_sized_route`): (need, neglected, band).
    power: tuple | None = None

    @property
    def memory(self) -> int:
        return self.route[7]

    @property
    def level(self) -> int:
        """Worst verdict among the items that depend on the method (0 ok … 2 invalid)."""
        return max((_LEVEL[v.verdict] for v in self.items if v.key not in SHARED_ITEMS), default=0)

    def name(self) -> str:
        m, v = self.route[0], self.route[1]
        if v == "far_field_nonparaxial":
            return "non-paraxial Rayleigh–Sommerfeld far field"
        if v == "direct":
            return "direct Rayleigh–Sommerfeld sum"
        if self.power is not None:
            return "angular spectrum on a power-sized grid"
        if v in ("far_field", "band_limited"):
            return m.replace("_", " ")
        return f"{m.replace('_', ' ')} ({v.replace('_', ' ')})"


def _candidates(g, box, ph, src, setup, dtype, memory_limit) -> dict[str, _Candidate]:
    """Every method that can be planned for this geometry, with its report and cost.

    An angular spectrum whose geometric grid is over ``memory_limit`` is planned on a
    grid sized by the power that reaches the window instead, where that fits
    (:func:`_sized_route`); its report then states the power and fringes neglected.
    """
    out: dict[str, _Candidate] = {}
    for key in _CANDIDATES:
        if key == "far_field" and (g.f is not None or any(g.unbounded)):
            continue  # a lens's focal plane is paraxial; an unbounded aperture has no far field
        r: list[str] = []
        try:
            route = _method_route(g, box, src, setup, dtype, r, key)
        except (SetupError, ArithmeticError, ValueError):
            continue  # not plannable here (the preferred method re-raises its own message)
        try:
            route, power = _sized_route(g, box, src, setup, dtype, r, route, memory_limit)
        except (SetupError, ArithmeticError, ValueError):
            power = None  # no power-sized grid: the geometric one, over the memory limit
        if (
            key == "fresnel_impulse_response"
            and "fresnel" in out
            and out["fresnel"].route[1] == route[1]
        ):
            continue
        m, v, _nx, _ny, dx, dy, padded = route[:7]
        need, neglected, _band = power if power is not None else (None, None, None)
        items = _report(g, box, ph, m, v, dx, dy, padded, setup, need, neglected)
        out[key] = _Candidate(key, route, r, items, _route_seconds(route, setup), power)
    return out


def _auto_route(g, box, ph, src, setup, dtype, reasons, memory_limit, time_budget):
    """The rule, in one place: `auto` never returns an invalid method while a valid one fits.

    The preferred method (:func:`_auto_method`: the far field, then Fresnel, then the
    angular spectrum, by the phases they drop) is kept when its report holds and it
    fits the memory limit, unless the direct Rayleigh–Sommerfeld sum is valid too,
    within the time budget and estimated faster. Otherwise the valid candidate that fits is
    taken, the best verdict first, then the preferred one, then the fastest. When no
    candidate is valid within the budget, the preferred one is returned (or the
    fastest that fits the memory) and its report says invalid: the verdict of the
    result is then ``'invalid'`` and the reasons say that no method fits.

    Returns the route and, for an angular spectrum on a power-sized grid, its
    ``(need, neglected, band)`` (else None).
    """
    pref_reasons: list[str] = []
    preferred = _auto_method(g, ph, pref_reasons)
    cands = _candidates(g, box, ph, src, setup, dtype, memory_limit)
    if preferred not in cands:
        # It cannot even be planned: let it raise its own message.
        route = _method_route(g, box, src, setup, dtype, reasons, preferred)
        reasons[:0] = pref_reasons
        return route, None
    pref = cands[preferred]
    fits = [c for c in cands.values() if c.memory <= memory_limit]
    quick = [c for c in fits if c.seconds <= time_budget]
    budget = (
        f"the {memory_limit / 2**30:.3g} GiB memory limit and the {time_budget:.3g} s time budget"
    )
    choice = None
    if pref in fits and pref.level == 0:
        # The time budget bounds the alternatives (the direct sum above all); the
        # preferred method is kept when it holds and fits the memory, as before.
        choice = pref
        reasons.extend(pref_reasons)
        direct = cands.get("rayleigh_sommerfeld")
        if direct in quick and direct.level == 0 and direct.seconds < pref.seconds:
            choice = direct
            reasons.append(
                f"the direct Rayleigh–Sommerfeld sum is valid and the cheapest here "
                f"(about {direct.seconds:.2g} s against {pref.seconds:.2g} s for the "
                f"{pref.name()})"
            )
        reasons.extend(choice.reasons)
        return choice.route, choice.power
    ranked = sorted(quick, key=lambda c: (c.level, c is not pref, c.seconds))
    if ranked and ranked[0].level < 2:
        choice = ranked[0]
    if choice is pref:
        reasons.extend(pref_reasons)
    elif choice is not None:
        why = _why_not(pref, memory_limit, time_budget)
        reasons.append(
            f"the {pref.name()} would be {why}; the {choice.name()} is valid and fits {budget}"
        )
    else:
        # Nothing valid within both budgets: the preferred method when it fits the
        # memory, else the fastest that does; its report says what does not hold.
        choice = (
            pref if pref in fits else min(fits, key=lambda c: (c.seconds, c.level), default=pref)
        )
        if choice is pref:
            reasons.extend(pref_reasons)
        if choice.level == 2:
            reasons.append(
                f"no method is valid within {budget}: the result is computed with the "
                f"{choice.name()} and marked invalid (see the report)"
            )
        else:
            reasons.append(
                f"no method is valid within {budget}; the {choice.name()} holds here and is "
                f"computed anyway (about {choice.seconds:.2g} s)"
            )
    reasons.extend(choice.reasons)
    return choice.route, choice.power


def _why_not(c: _Candidate, memory_limit: int, time_budget: float) -> str:
    if c.memory > memory_limit:
        return f"over the memory limit ({c.memory / 2**30:.3g} GiB)"
    if c.seconds > time_budget:
        return f"too slow (about {c.seconds:.2g} s)"
    bad = [v.label.lower() for v in c.items if v.key not in SHARED_ITEMS and _LEVEL[v.verdict] == 2]
    if bad:
        return "invalid here (" + "; ".join(bad) + ")"
    marg = [
        v.label.lower() for v in c.items if v.key not in SHARED_ITEMS and _LEVEL[v.verdict] == 1
    ]
    return "marginal here (" + "; ".join(marg) + ")"


def alternatives(
    setup: Setup,
    *,
    memory_limit: int = DEFAULT_MEMORY_LIMIT,
    time_budget: float = DEFAULT_TIME_BUDGET,
) -> list[Plan]:
    """Every method the planner can plan for ``setup``, each with its report.

    The candidates among which ``auto`` chooses (:func:`plan`), including the
    non-paraxial far field, which has no name of its own in ``numerics.method``
    (it is the far-field form of ``rayleigh_sommerfeld``). A plan over
    ``memory_limit`` is listed with its memory estimate; nothing is allocated.
    """
    problems = setup.check()
    if problems:
        raise SetupError(*problems[0])
    g = _geometry(setup)
    if g.lit is None:
        return [plan(setup, memory_limit=memory_limit, time_budget=time_budget)]
    box = _lit_with_taper(g)
    ph = _phases(g, box)
    dtype = "complex64" if setup.numerics.precision == "single" else "complex128"
    return [
        _to_plan(c.route, c.reasons, c.items, c.seconds, g, ph, dtype, c.power)
        for c in _candidates(g, box, ph, setup.source, setup, dtype, memory_limit).values()
    ]


def _to_plan(route, reasons, items, seconds, g, ph, dtype, power=None) -> Plan:
    method, variant, nx, ny, dx, dy, padded, mem, centre, output, step = route
    return Plan(
        method=method,
        variant=variant,
        nx=nx,
        ny=ny,
        dx=dx,
        dy=dy,
        padded=padded,
        reasons=reasons,
        memory_bytes=int(mem),
        fresnel_number=ph["fresnel_number"],
        validity=items,
        grid_centre=centre,
        lit_box=g.lit,
        taper=(
            tuple(_taper_width(g) if u else 0.0 for u in g.unbounded) if any(g.unbounded) else None
        ),
        babinet=g.babinet,
        dtype=dtype,
        output=output,
        step=step,
        seconds=seconds,
        band=power[2] if power is not None else None,
    )


# --------------------------------------------------------------------------- power-limited band

# A large near-field window: the steepest geometric angle would need a grid far over
# the memory limit, while almost all of the light that reaches the window is at low
# spatial frequencies. The grid is then sized by the band that holds all but a stated
# fraction of the power of the propagated aperture field; the report states the fraction.
POWER_NEGLECTED_LIMITS = (5e-4, 5e-3)  # ok below the first, marginal below the second
# The edge waves left out change the irradiance where they meet the direct light by up
# to this fraction of the local irradiance: ok, marginal.
FRINGE_NEGLECTED_LIMITS = (0.02, 0.1)
# Fractions tried in turn, the smallest first; the first grid that fits is used.
POWER_NEGLECTED_STEPS = (1e-4, 2e-4, 5e-4, 1e-3, 2e-3, 5e-3, 1e-2)
POWER_ESTIMATE_SAMPLES = 1024  # samples per side of the grid that measures the spectrum
_POWER_FIT_BAND = (0.05, 0.2)  # of the estimate's sampling frequency: where the tail is fitted


@dataclass
class _AxisSpectrum:
    """Power spectrum of the aperture field along one axis, as a tail fraction.

    ``tail(f)`` is the fraction of the power at spatial frequencies |f_axis| > f:
    measured up to ``f_top``, and beyond it the tail of a hard edge, whose power
    density falls as 1/f² (so the power beyond f as ``k/f``).
    """

    freqs: np.ndarray  # |f| of the measured bins, ascending, cycles/m
    beyond: np.ndarray  # fraction of the power above each bin, up to f_top
    f_top: float
    k: float

    def tail(self, f: float) -> float:
        if f >= self.f_top:
            return self.k / f
        i = int(np.searchsorted(self.freqs, f, side="right"))
        measured = float(self.beyond[i - 1]) if i > 0 else 1.0
        return measured + self.k / self.f_top

    def band(self, fraction: float) -> float:
        """The smallest frequency beyond which at most ``fraction`` of the power lies."""
        if self.k / self.f_top > fraction:
            return self.k / fraction
        left = fraction - self.k / self.f_top
        ok = np.nonzero(self.beyond <= left)[0]
        return float(self.freqs[ok[0]]) if ok.size else self.f_top


def _raised_cosine(coord: np.ndarray, lo: float, hi: float, t_lo: float, t_hi: float):
    w = np.ones_like(coord)
    if t_lo > 0:
        w *= 0.5 * (1.0 + np.cos(np.pi * np.clip((lo - coord) / t_lo, 0.0, 1.0)))
    if t_hi > 0:
        w *= 0.5 * (1.0 + np.cos(np.pi * np.clip((coord - hi) / t_hi, 0.0, 1.0)))
    return w


def _power_spectra(g: _Geometry, box, setup: Setup):
    """Measured power spectra of the propagated aperture field along x and y, or None.

    The aperture field (|incident field| × transmittance, the complement on a
    clear background, tapered where the aperture is unbounded) is sampled on a grid of
    :data:`POWER_ESTIMATE_SAMPLES` per side over the lit region; the squared moduli
    of its transforms along one axis, summed over the other (Parseval), give the
    power per frequency bin. Above ``0.2/h`` the 1/f² density of a straight edge
    (Born & Wolf, *Principles of Optics*, 7th ed., §8.7: the edge diffracts a field
    falling as 1/(π u) from the shadow boundary) extends the measurement, fitted
    over ``0.05/h … 0.2/h``, where sampling the edge changes its spectrum by less
    than a tenth.

    The incident phase (a tilt, a beam's curvature, a point source's sphere) is
    taken off: the spectra are those of |incident| × transmittance, and the
    caller adds the source's largest local frequency to the band.

    None when the estimate cannot be trusted: a feature finer than four estimate
    samples, or a lens.
    """
    if g.f is not None:
        return None
    n = POWER_ESTIMATE_SAMPLES
    pad = 4
    hx = (box[1] - box[0]) / (n - 2 * pad)
    hy = (box[3] - box[2]) / (n - 2 * pad)
    if not (hx > 0 and hy > 0) or (math.isfinite(g.feature) and g.feature < 4.0 * max(hx, hy)):
        return None
    src = setup.source
    x = box[0] - pad * hx + (np.arange(n) + 0.5) * hx
    y = box[2] - pad * hy + (np.arange(n) + 0.5) * hy
    t = apertures.transmittance(setup.aperture, x, y, pitch=(hx, hy))
    if g.babinet:
        t = 1.0 - t
    u = np.abs(sources.incident_field(src, x, y)) * t
    if any(g.unbounded):
        tw = _taper_width(g)
        x0, x1, y0, y1 = g.lit
        un = g.unbounded
        u *= _raised_cosine(y, y0, y1, tw * un[2], tw * un[3])[:, None]
        u *= _raised_cosine(x, x0, x1, tw * un[0], tw * un[1])[None, :]
    out = []
    for axis, h in ((1, hx), (0, hy)):
        s = np.abs(np.fft.fft(u, axis=axis)) ** 2
        s = s.sum(axis=1 - axis)
        total = float(s.sum())
        if not total > 0:
            return None
        f = np.abs(np.fft.fftfreq(n, h))
        order = np.argsort(f, kind="stable")
        f, s = f[order], s[order] / s.sum()
        f_top = _POWER_FIT_BAND[1] / h
        inside = f <= f_top
        f, s = f[inside], s[inside]
        beyond = s.sum() - np.cumsum(s)
        fit = (f >= _POWER_FIT_BAND[0] / h) & (f > 0)
        density = s[fit] * (n * h)  # per unit frequency
        # each |f| holds two bins (±f): the density in |f| is twice that of one bin
        k = 2.0 * float(np.median(density * f[fit] ** 2)) if fit.any() else 0.0
        beyond = np.clip(beyond, 0.0, None)
        out.append(_AxisSpectrum(freqs=f, beyond=beyond, f_top=f_top, k=max(k, 0.0)))
    return out[0], out[1]


def _plan_power_route(g, box, src, setup, dtype, reasons, memory_limit):
    """The angular spectrum on a grid sized by the power that reaches the window.

    Returns the route and the report's items (the needed frequencies and the
    neglected fraction), or None when the spectrum cannot be measured or the
    grid still does not fit. Tries the fractions of :data:`POWER_NEGLECTED_STEPS`
    in turn, the smallest first.
    """
    spectra = _power_spectra(g, box, setup)
    if spectra is None:
        return None
    geo = (
        _needed_frequency(g, box, src, paraxial_out=False, axis=0),
        _needed_frequency(g, box, src, paraxial_out=False, axis=1),
    )
    # The spectra are of the field without its incident phase: the source's local
    # frequency shifts every component by at most f_src.
    f_src = sources.local_frequency(src, _abs_max(box[:2]), _abs_max(box[2:]))
    for limit in POWER_NEGLECTED_STEPS:
        need = tuple(
            min(
                geo[a],
                f_src[a] + max(spectra[a].band(0.5 * limit), 1e-3 / (box[2 * a + 1] - box[2 * a])),
            )
            for a in (0, 1)
        )
        trial: list[str] = []
        route = _plan_convolution_route(
            g, box, src, setup, dtype, trial, "angular_spectrum", "band_limited", need=need
        )
        if route[7] <= memory_limit:
            # The band the grid carries: the planned pitch may be finer than the need.
            carried = (1.0 / (2.0 * OVERSAMPLE * route[4]), 1.0 / (2.0 * OVERSAMPLE * route[5]))
            # the band about the local carrier (positive: carried ≥ need > f_src when sized)
            own = [max(carried[a] - f_src[a], 1e-12 * carried[a]) for a in (0, 1)]
            limited = [a for a in (0, 1) if carried[a] < geo[a]]
            fraction = sum(spectra[a].tail(own[a]) for a in limited)
            bounds = [_fringe_bound(g, box, spectra[a], own[a], a) for a in limited]
            fringe = max(bounds, default=0.0)
            reach = min((_travel(g, own[a]) for a in limited), default=math.inf)
            reasons.append(
                "a grid for the steepest geometric angle would not fit the memory limit: the "
                "grid is sized by the spatial frequencies that carry the light reaching the "
                f"window (up to {need[0]:.3g} and {need[1]:.3g} cycles/m along x and y), "
                f"neglecting an estimated {fraction:.2g} of the power"
            )
            reasons.extend(t.replace("the steepest needed angle", "that band") for t in trial)
            band = tuple(carried[a] if a in limited else math.inf for a in (0, 1))
            return route, need, (fraction, fringe, reach), band
    return None


def _sized_route(g, box, src, setup, dtype, reasons, route, memory_limit):
    """The angular spectrum on a power-sized grid when its geometric grid does not fit.

    ``route`` is a planned route. When it is the angular spectrum, over
    ``memory_limit``, and the grid is automatic (``numerics.grid`` 0), it is planned
    again by :func:`_plan_power_route`; ``reasons`` then lose the geometric grid's
    sentence and gain the power route's. Returns the route and ``(need, neglected,
    band)`` of the power-sized grid, or the route unchanged and None.
    """
    if route[0] != "angular_spectrum" or route[7] <= memory_limit or setup.numerics.grid:
        return route, None
    sized_reasons: list[str] = []
    sized = _plan_power_route(g, box, src, setup, dtype, sized_reasons, memory_limit)
    if sized is None:
        return route, None
    route, need, neglected, band = sized
    reasons[:] = [r for r in reasons if not r.startswith("FFT grid")] + sized_reasons
    return route, (need, neglected, band)


def _fringe_bound(g: _Geometry, box, spectrum: _AxisSpectrum, f: float, axis: int) -> float:
    """Largest change of the irradiance, relative, by the edge waves beyond ``f``.

    A straight edge's diffracted wave at u = √(2/(λz))·x from the shadow boundary has
    the relative amplitude 1/(π u √2) (Born & Wolf, *Principles of Optics*, 7th ed.,
    §8.7, the asymptotic Fresnel integrals); the band ends at x = λ z f, where it
    beats with the direct light by up to 1/(π f √(λz)). An edge across the whole lit
    width W with the mean irradiance has the tail k = 1/(2π² W); a weaker tail scales
    the amplitude by √(k / that).
    """
    width = box[2 * axis + 1] - box[2 * axis]
    strength = min(1.0, math.sqrt(2.0 * math.pi**2 * width * spectrum.k))
    return strength / (math.pi * f * math.sqrt(g.lam * abs(g.z)))


def _power_items(power: tuple[float, float, float]) -> list[ValidityItem]:
    fraction, fringe, reach = power
    v = _verdict(fraction, POWER_NEGLECTED_LIMITS)
    vf = _verdict(fringe, FRINGE_NEGLECTED_LIMITS)
    return [
        ValidityItem(
            "power_neglected",
            "Power outside the grid's band",
            fraction,
            POWER_NEGLECTED_LIMITS[0],
            "",
            v,
            f"The grid carries the spatial frequencies that hold all but {fraction:.2g} of "
            "the power of the aperture field; the light neglected is the weak, steep "
            "diffraction of the edges far from them.",
        ),
        ValidityItem(
            "fringes_neglected",
            "Edge fringes left out, relative",
            fringe,
            FRINGE_NEGLECTED_LIMITS[0],
            "",
            vf,
            f"Farther than {length_text(reach)} from an edge its diffracted wave is left out; "
            f"with the direct light it would make fringes of up to {fringe:.2g} of the local "
            "irradiance.",
        ),
    ]


# --------------------------------------------------------------------------- report


def length_text(m: float) -> str:
    """A length in the unit a bench uses for it: nm, µm, mm or m."""
    a = abs(m)
    if not math.isfinite(a):
        return "unbounded"
    for unit, scale in (("m", 1.0), ("mm", 1e-3), ("µm", 1e-6)):
        if a >= scale:
            return f"{m / scale:.3g} {unit}"
    return f"{m / 1e-9:.3g} nm"


def _verdict(value: float, limits: tuple[float, float]) -> str:
    if not math.isfinite(value):
        return "invalid"
    if value <= limits[0]:
        return "ok"
    return "marginal" if value <= limits[1] else "invalid"


def _verdict_low(value: float, limits: tuple[float, float]) -> str:
    """Verdict for a margin that must be large: ok ≥ limits[0], marginal ≥ limits[1]."""
    if value >= limits[0]:
        return "ok"
    return "marginal" if value >= limits[1] else "invalid"


def _finest_period(g: _Geometry, box) -> float:
    """Finest fringe period the pattern can hold on the screen, m.

    Two aperture points at the extremes of the lit region interfere with a
    local period λ / |sin θ₁ − sin θ₂| (common practice, no source).
    """
    best = math.inf
    for ax in (0, 1):
        a = box[2 * ax : 2 * ax + 2]
        s = g.screen[2 * ax : 2 * ax + 2]
        for xs in (s[0], 0.5 * (s[0] + s[1]), s[1]):
            t1 = math.atan2(xs - a[0], g.z)
            t2 = math.atan2(xs - a[1], g.z)
            d = abs(math.sin(t1) - math.sin(t2))
            if d > 0:
                best = min(best, g.lam / d)
    return best


def _report(
    g, box, ph, method, variant, dx, dy, padded, setup, need=None, power_fraction=None
) -> list[ValidityItem]:
    """The validity report; ``need`` and ``power_fraction`` come from a power-sized grid."""
    items: list[ValidityItem] = []
    nf = ph["fresnel_number"]
    far = method == "fraunhofer" or variant == "far_field_nonparaxial"
    paraxial = method in ("fraunhofer", "fresnel")
    lens = g.f is not None
    if lens:
        # Behind a lens the regime is set by the effective distance 1/|1/z − 1/f|.
        inv = abs(1.0 / g.z - 1.0 / g.f)
        nf_eff = ph["half"] ** 2 * inv / g.lam
        v = _verdict(nf_eff, (0.1, 1.0)) if far else "ok"
        place = (
            "the lens's far field (its focal plane)"
            if nf_eff < 0.1
            else ("the lens's Fresnel zone, out of focus")
        )
        s = (
            f"with the lens the effective Fresnel number a²|1/z − 1/f|/λ is {nf_eff:.3g}: "
            f"the screen is in {place}"
        )
        limit = 0.1 if far else math.inf
    elif far:
        v = _verdict(nf, (0.1, 1.0))
        s = {
            "ok": "small enough for the far field",
            "marginal": "the far-field form starts to miss the Fresnel-zone structure",
            "invalid": "the screen is in the Fresnel zone or nearer; the far-field "
            "pattern is wrong here",
        }[v]
        limit = 0.1
    else:
        v = "ok"
        s = "the far field" if nf < 0.1 else "the Fresnel zone" if nf < 10 else "the near field"
        s = f"the screen is in {s}; {method.replace('_', ' ')} holds at any Fresnel number"
        limit = math.inf
    items.append(
        ValidityItem(
            "fresnel_number",
            "Fresnel number a²/(λz)",
            nf,
            limit,
            "",
            v,
            f"N_F = {nf:.3g}: {s}.",
        )
    )
    zf = ph["fraunhofer_distance"]
    if far and not lens:
        v = _verdict(zf / g.z, (1.0, 10.0))
        s = (
            f"the screen at {g.z:.3g} m is {'beyond' if g.z >= zf else 'inside'} the "
            f"Fraunhofer distance {zf:.3g} m"
        )
    else:
        v = "ok"
        s = f"the Fraunhofer distance is {zf:.3g} m; this method does not rely on it"
    items.append(
        ValidityItem(
            "fraunhofer_distance",
            "Fraunhofer distance 2D²/λ",
            zf,
            g.z,
            "m",
            v,
            s[0].upper() + s[1:] + ".",
        )
    )
    fp = ph["fraunhofer_phase"]
    if variant == "far_field_nonparaxial":
        # Expanded about the centre of the lit region, not about the axis.
        fp = ph["far_field_phase"]
        v = _verdict(fp, FRAUNHOFER_PHASE_LIMITS)
        s = (
            f"The far-field form drops a phase of second order of up to {fp:.3g} rad across "
            "the aperture, about its centre."
        )
    elif far:
        v = _verdict(fp, FRAUNHOFER_PHASE_LIMITS)
        s = f"The far-field form drops a quadratic phase of up to {fp:.3g} rad across the aperture."
    else:
        v = "ok"
        s = f"A far-field form would drop {fp:.3g} rad; {method.replace('_', ' ')} keeps it."
    items.append(
        ValidityItem(
            "fraunhofer_phase",
            "Quadratic phase dropped by Fraunhofer",
            fp,
            FRAUNHOFER_PHASE_LIMITS[0],
            "rad",
            v,
            s,
        )
    )
    pp = ph["paraxial_phase"]
    if paraxial:
        v = _verdict(pp, PARAXIAL_PHASE_LIMITS)
        s = f"The paraxial form drops a quartic phase of up to {pp:.3g} rad at the window's edge."
    else:
        v = "ok"
        s = f"The paraxial form would drop {pp:.3g} rad; this method is non-paraxial."
    items.append(
        ValidityItem(
            "paraxial_phase",
            "Quartic phase dropped by Fresnel",
            pp,
            PARAXIAL_PHASE_LIMITS[0],
            "rad",
            v,
            s,
        )
    )
    ang = ph["max_angle"]
    v = _verdict(ang, ANGLE_LIMITS)
    items.append(
        ValidityItem(
            "max_angle",
            "Largest angle on the screen",
            ang,
            ANGLE_LIMITS[0],
            "rad",
            v,
            f"Rays reach the screen at up to {math.degrees(ang):.3g}°"
            + (
                "; scalar theory is sound there."
                if v == "ok"
                else "; polarisation and obliquity effects that scalar theory ignores grow there."
            ),
        )
    )
    if math.isfinite(g.feature):
        per = g.feature / min(dx, dy) if method != "fraunhofer" else g.feature / max(dx, dy)
        per = g.feature / max(dx, dy)
        v = _verdict_low(per, (4.0, 2.0))
        items.append(
            ValidityItem(
                "aperture_sampling",
                "Samples across the smallest feature",
                per,
                4.0,
                "",
                v,
                f"The smallest aperture feature ({length_text(g.feature)}) spans "
                f"{per:.3g} samples.",
            )
        )
    # Bandwidth: the grid's Nyquist frequency against the highest frequency needed.
    src = setup.source
    f_need = max(
        _needed_frequency(g, box, src, paraxial_out=paraxial and method != "fresnel", axis=0) * dx,
        _needed_frequency(g, box, src, paraxial_out=paraxial and method != "fresnel", axis=1) * dy,
    )
    if need is not None:
        f_need = max(need[0] * dx, need[1] * dy)
    margin = 0.5 / f_need if f_need > 0 else math.inf
    v = _verdict_low(margin, (1.0, 0.5))
    items.append(
        ValidityItem(
            "bandwidth",
            "Grid bandwidth over the needed bandwidth",
            margin,
            1.0,
            "",
            v,
            (
                f"The grid carries {margin:.3g}× the highest spatial frequency that reaches "
                "the screen window."
                if need is None
                else f"The grid carries {margin:.3g}× the band that holds all but the neglected "
                "power (see below)."
            ),
        )
    )
    if variant == "transfer_function":
        crit = min(dx * padded[1] * dx, dy * padded[0] * dy) / (g.lam * g.z)
        v = _verdict_low(crit, (1.0, 0.5))
        items.append(
            ValidityItem(
                "transfer_function_sampling",
                "Pitch over λz/L (transfer-function form)",
                crit,
                1.0,
                "",
                v,
                "The Fresnel transfer function is sampled without aliasing when the pitch is "
                f"at least λz/L; here the ratio is {crit:.3g}.",
            )
        )
    if method == "angular_spectrum":
        ulx = band_limit_of(padded[1], dx, g.lam, g.z)
        uly = band_limit_of(padded[0], dy, g.lam, g.z)
        need_x = _needed_frequency(g, box, src, paraxial_out=False, axis=0)
        need_y = _needed_frequency(g, box, src, paraxial_out=False, axis=1)
        if need is not None:
            need_x, need_y = need
        r = min(ulx / need_x if need_x else math.inf, uly / need_y if need_y else math.inf)
        v = _verdict_low(r, (1.0, 0.7))
        items.append(
            ValidityItem(
                "band_limit",
                "Band limit over the needed bandwidth",
                r,
                1.0,
                "",
                v,
                f"The band limit keeps {min(r, 99):.3g}× the frequencies that reach the window.",
            )
        )
    if power_fraction is not None:
        items.extend(_power_items(power_fraction))
    period = _finest_period(g, box)
    ratio = period / (2.0 * max(g.dxs, g.dys))
    v = _verdict_low(ratio, (1.0, 0.5))
    items.append(
        ValidityItem(
            "screen_sampling",
            "Finest fringe over two screen pixels",
            ratio,
            1.0,
            "",
            v,
            f"The finest fringe period the pattern can hold is {length_text(period)}"
            + (
                "; the screen pixels resolve it."
                if v == "ok"
                else "; the screen pixels are too coarse to resolve it (raise screen.samples)."
            ),
        )
    )
    if any(g.unbounded):
        v = "invalid" if far else "ok"
        items.append(
            ValidityItem(
                "window",
                "Unbounded aperture",
                _taper_width(g),
                math.inf,
                "m",
                v,
                "The aperture is unbounded; it is computed over the region that reaches the "
                "window, with smooth edges "
                + (
                    "— a far-field pattern does not exist for it."
                    if far
                    else "several Fresnel zones wide."
                ),
            )
        )
    return items


def band_limit_of(n: int, d: float, lam: float, z: float) -> float:
    du = 1.0 / (n * d)
    return 1.0 / (lam * math.sqrt((2.0 * du * z) ** 2 + 1.0))


# --------------------------------------------------------------------------- entry point


def plan(
    setup: Setup,
    *,
    memory_limit: int = DEFAULT_MEMORY_LIMIT,
    time_budget: float = DEFAULT_TIME_BUDGET,
) -> Plan:
    """Plan the computation of ``setup``: method, grid, pitch, padding and the report.

    With ``numerics.method == 'auto'`` the rule holds (:func:`_auto_route`): the
    plan is never one that its own report calls invalid while another method is
    valid within ``memory_limit`` and ``time_budget`` (estimated seconds,
    :data:`DEFAULT_TIME_BUDGET`). When none is, the plan's :attr:`Plan.verdict` is
    ``'invalid'`` and its reasons say so.

    Raises
    ------
    SetupError
        When the setup breaks a cross-parameter rule, or the computation would
        need more than ``memory_limit`` bytes; the message says what to change.
    """
    problems = setup.check()
    if problems:
        raise SetupError(*problems[0])
    g = _geometry(setup)
    src = setup.source
    dtype = "complex64" if setup.numerics.precision == "single" else "complex128"
    reasons: list[str] = []
    requested = setup.numerics.method
    if g.babinet:
        reasons.append(
            "clear background: the unobstructed beam is added in closed form and only the "
            "complement of the aperture is propagated (Babinet's principle)"
        )
    if any(g.unbounded):
        reasons.append(
            "the aperture is unbounded: it is computed over the region that reaches the "
            f"window, tapered smoothly over {length_text(_taper_width(g))}"
        )
    if g.lit is None:
        reasons.append("no light passes the aperture except the closed-form beam")
        box = (-1e-6, 1e-6, -1e-6, 1e-6)
        ph = _phases(g, box)
        p = Plan(
            method=requested if requested != "auto" else "fraunhofer",
            variant="closed_form",
            nx=0,
            ny=0,
            dx=0.0,
            dy=0.0,
            padded=(0, 0),
            reasons=reasons,
            memory_bytes=0,
            fresnel_number=0.0,
            babinet=g.babinet,
            dtype=dtype,
        )
        return p
    box = _lit_with_taper(g)
    ph = _phases(g, box)
    if requested == "auto":
        route, power = _auto_route(
            g, box, ph, src, setup, dtype, reasons, memory_limit, time_budget
        )
    else:
        reasons.append(f"method {requested.replace('_', ' ')} chosen by the user")
        route = _method_route(g, box, src, setup, dtype, reasons, requested)
        # An angular spectrum over the memory limit: the grid sized by the power.
        route, power = _sized_route(g, box, src, setup, dtype, reasons, route, memory_limit)
    need, power_fraction, band = power if power is not None else (None, None, None)
    method, variant, nx, ny, dx, dy, padded, mem, centre, output, step = route
    if mem > memory_limit:
        path = "numerics.grid" if setup.numerics.grid else "screen.distance"
        fix = (
            "lower numerics.grid"
            if setup.numerics.grid
            else "increase the distance, narrow the screen window, use fewer screen samples, "
            "or shrink the aperture"
        )
        raise SetupError(
            path,
            f"the computation needs about {mem / 2**30:.3g} GiB "
            f"(grid {padded[0]}×{padded[1]}), over the {memory_limit / 2**30:.3g} GiB limit; {fix}",
        )
    p = Plan(
        method=method,
        variant=variant,
        nx=nx,
        ny=ny,
        dx=dx,
        dy=dy,
        padded=padded,
        reasons=reasons,
        memory_bytes=int(mem),
        fresnel_number=ph["fresnel_number"],
        grid_centre=centre,
        lit_box=g.lit,
        taper=(
            tuple(_taper_width(g) if u else 0.0 for u in g.unbounded) if any(g.unbounded) else None
        ),
        babinet=g.babinet,
        dtype=dtype,
        output=output,
        step=step,
        band=band,
    )
    p.validity = _report(g, box, ph, method, variant, dx, dy, padded, setup, need, power_fraction)
    p.seconds = _route_seconds(route, setup)
    return p
