"""Partially coherent light and the camera: incoherent sums of monochromatic screens.

A broad-band source, a source of finite size and a camera all turn one coherent
computation into a weighted sum of them:

* Spectrum: the screen irradiance is Σ_k w_k I(x; λ_k), each wavelength
  propagated by :func:`compute.engine.compute` at its own wavelength onto the same
  screen pixels (those of :func:`compute.planning.screen_axes`, which depend on the
  screen alone), w_k its share of the irradiance (:mod:`compute.spectrum`).
* Source size: a uniform incoherent disk of angular diameter θ sends plane waves
  from every direction within a disk of radius ρ = sin(θ/2) of direction cosines
  about the incidence. Where the setup is shift-invariant — a plane or Gaussian
  wave through a paraxial method (Fraunhofer, Fresnel, with or without a lens) —
  a change δα of direction only shifts the irradiance by z·δα (the Fresnel shift
  theorem), so the pattern is the monochromatic one convolved with the uniform
  disk of radius zρ: computed once on a window widened by zρ and convolved with
  the exact pixel-overlap weights of that disk. Elsewhere (angular spectrum,
  Rayleigh–Sommerfeld, a point source) the disk is sampled with a product rule —
  Gauss–Legendre in the squared radius, equal steps in azimuth — fine enough for
  the widest baseline of the aperture.
* Camera: the same sums on the sensor's sub-pixel grid, integrated over each
  pixel's active area, counted in photons at each wavelength (:mod:`compute.camera`).

References
----------
.. [BW] M. Born and E. Wolf, *Principles of Optics*, 7th ed. (1999), ch. 10:
   interference of partially coherent light, the van Cittert–Zernike theorem
   (the visibility of fringes from two points b apart under a uniform disk source
   of angular diameter θ is |2 J₁(v)/v|, v = π b θ/λ).
.. [G] J. W. Goodman, *Introduction to Fourier Optics*, 3rd ed. (2005), §4.2
   (Fresnel diffraction of a tilted plane wave: the pattern shifts by z·α).
.. [AS] M. Abramowitz and I. A. Stegun, *Handbook of Mathematical Functions*
   (1964), ch. 25 (Gauss–Legendre quadrature; product rules over a circle).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import signal

from . import camera as cam
from . import colour, planning, sources, spectrum
from .cancel import checkpoint
from .errors import SetupError
from .metrics import _disc_rect_area
from .model import Camera, Screen, Setup, Source
from .planning import DEFAULT_MEMORY_LIMIT, Plan, ValidityItem

__all__ = [
    "MAX_AUTO_DIRECTIONS",
    "MAX_COMPONENTS",
    "Route",
    "check",
    "compute",
    "describe",
    "disk_directions",
    "max_path_difference",
    "needed",
    "route",
]

PARAXIAL_METHODS = ("fraunhofer", "fresnel")
SHIFT_INVARIANT_KINDS = ("plane", "gaussian")
MAX_AUTO_DIRECTIONS = 128
MAX_COMPONENTS = 1024  # monochromatic screens (wavelengths × directions) in one sum
MAX_SENSOR_SAMPLES = 5e8  # sub-pixel samples × components computed for one frame
MAX_SCREEN_SAMPLES = 4096
# Colour: the colour-matching functions vary over some 50 nm, so a spectrum that
# reaches the visible is sampled at least every COLOUR_STEP for its true colour.
COLOUR_STEP = 20e-9
VISIBLE = (380e-9, 780e-9)
_NEW_SOURCE_KEYS = ("spectrum", "bandwidth", "spectral_samples", "source_diameter")
_DIGITISATION_KEYS = (
    "quantum_efficiency",
    "exposure",
    "full_well",
    "bit_depth",
    "read_noise",
    "shot_noise",
    "seed",
)


def needed(setup: Setup) -> bool:
    """True when ``setup`` needs more than one coherent computation (or a camera)."""
    s = setup.source
    broad = s.spectrum != "none" and s.bandwidth > 0.0
    return broad or s.source_diameter > 0.0 or setup.camera is not None


# --------------------------------------------------------------------------- components


_SOURCE_KEYS = tuple(n for n in Source.param if n != "name")
_SOURCE_DEFAULTS = {n: Source.param[n].default for n in _NEW_SOURCE_KEYS}


def _mono_source(src: Source, wavelength: float, dalpha: float = 0.0, dbeta: float = 0.0):
    """A monochromatic point-like copy of ``src`` at ``wavelength``, turned by (δα, δβ)."""
    values = {n: getattr(src, n) for n in _SOURCE_KEYS}
    values.update(_SOURCE_DEFAULTS)
    values["wavelength"] = float(wavelength)
    if dalpha or dbeta:
        a = math.sin(src.tilt_x) + dalpha
        b = math.sin(src.tilt_y) + dbeta
        limit = math.sin(1.0)
        if abs(a) > limit or abs(b) > limit or a * a + b * b >= 1.0:
            raise SetupError(
                "source.source_diameter",
                "the source's directions reach beyond the tilt limit of ±1 rad; reduce the "
                "source diameter or the tilt",
            )
        values["tilt_x"] = math.asin(a)
        values["tilt_y"] = math.asin(b)
    return Source(**values)


def _with(setup: Setup, *, source: Source | None = None, screen: Screen | None = None) -> Setup:
    """A camera-less copy of ``setup`` with another source or screen (the aperture shared)."""
    return Setup(
        source=source if source is not None else setup.source,
        aperture=setup.aperture,
        screen=screen if screen is not None else setup.screen,
        numerics=setup.numerics,
    )


def _window_box(s: Screen) -> tuple[float, float, float, float]:
    return (s.x - s.width / 2, s.x + s.width / 2, s.y - s.height / 2, s.y + s.height / 2)


def _windows(setup: Setup) -> list[tuple[float, float, float, float]]:
    boxes = [_window_box(setup.screen)]
    if setup.camera is not None:
        boxes.append(cam.sensor_box(setup.camera))
    return boxes


# --------------------------------------------------------------------------- geometry


def _aperture_points(setup: Setup, boxes) -> np.ndarray | None:
    """Points of the lit aperture region that bound its path differences, (n, 2), m.

    A 9 × 9 grid over the lit box (with the tapers of an unbounded aperture); on a
    clear background also the points where the unobstructed beam reaching the
    windows crosses the aperture plane.
    """
    g = planning._geometry(setup)
    if g.lit is None:
        return None
    box = planning._lit_with_taper(g)
    gx, gy = np.meshgrid(np.linspace(box[0], box[1], 9), np.linspace(box[2], box[3], 9))
    pts = [np.column_stack([gx.ravel(), gy.ravel()])]
    if g.babinet:
        a, b, _ = sources.direction_cosines(setup.source)
        for w in boxes:
            sx, sy = np.meshgrid(np.linspace(w[0], w[1], 9), np.linspace(w[2], w[3], 9))
            pts.append(np.column_stack([sx.ravel() - g.z * a, sy.ravel() - g.z * b]))
    return np.vstack(pts)


def _optical_paths(setup: Setup, ap: np.ndarray, scr: np.ndarray) -> np.ndarray:
    """Optical path from the source through each aperture point to each screen point, m.

    Shape (len(scr), len(ap)); a constant common to all paths is dropped.
    """
    src = setup.source
    xi, eta = ap[:, 0], ap[:, 1]
    a, b, _ = sources.direction_cosines(src)
    if src.kind == "point":
        d = src.distance
        xs, ys = -d * math.tan(src.tilt_x), -d * math.tan(src.tilt_y)
        path = np.sqrt((xi - xs) ** 2 + (eta - ys) ** 2 + d * d)
    else:
        path = a * xi + b * eta
        if src.kind == "gaussian":
            z_r = math.pi * src.waist**2 / src.wavelength
            curvature = (1.0 / complex(src.waist_offset, -z_r)).real
            path = path + 0.5 * curvature * (xi**2 + eta**2)
    f = setup.screen.lens_focal_length
    if f is not None:
        path = path - (xi**2 + eta**2) / (2.0 * f)
    z = setup.screen.distance
    dx = scr[:, 0:1] - xi[None, :]
    dy = scr[:, 1:2] - eta[None, :]
    return path[None, :] + np.sqrt(dx * dx + dy * dy + z * z)


def max_path_difference(setup: Setup, boxes=None) -> float:
    """Largest optical path difference between two lit aperture points seen from one point.

    Over the screen window (and the sensor, when a camera is set), m; 0 when no
    light passes the aperture except a closed-form beam.
    """
    boxes = _windows(setup) if boxes is None else boxes
    ap = _aperture_points(setup, boxes)
    if ap is None:
        return 0.0
    worst = 0.0
    for w in boxes:
        sx, sy = np.meshgrid(np.linspace(w[0], w[1], 9), np.linspace(w[2], w[3], 9))
        paths = _optical_paths(setup, ap, np.column_stack([sx.ravel(), sy.ravel()]))
        worst = max(worst, float(np.max(np.ptp(paths, axis=1))))
    return worst


def _baseline(setup: Setup, boxes) -> float:
    """Largest distance between two lit aperture points, m."""
    ap = _aperture_points(setup, boxes)
    if ap is None:
        return 0.0
    return float(math.hypot(np.ptp(ap[:, 0]), np.ptp(ap[:, 1])))


def _disk_rule(v: float) -> tuple[int, int]:
    """Radial and azimuthal orders (K, M) for a disk integral of phase variation v.

    Measured against 2 J₁(v)/v (scipy.special.j1) for every v′ ≤ v and every
    orientation: the largest error is below 2e-3 (tests/test_incoherent.py).
    """
    if v <= 0.3:
        return 1, 3
    if v <= 1.0:
        return 1, 5
    return math.ceil(v / 4.0 + 2.0), math.ceil(v) + 6


def disk_directions(radius: float, v: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Directions (δα, δβ) and weights sampling a uniform disk of direction cosines.

    Gauss–Legendre in u = (r/ρ)² (uniform for a uniform disk) times equal steps in
    azimuth; ``v`` = k b ρ is the largest phase across the source of an
    interference term (k the wavenumber, b the widest aperture baseline). The
    weights sum to 1.

    References
    ----------
    Abramowitz & Stegun (1964), ch. 25.
    """
    if radius <= 0.0:
        return np.zeros(1), np.zeros(1), np.ones(1)
    n_r, n_phi = _disk_rule(v)
    t, w = np.polynomial.legendre.leggauss(n_r)
    r = radius * np.sqrt(0.5 * (t + 1.0))
    phi = (np.arange(n_phi) + 0.5) * (2.0 * math.pi / n_phi)
    rr = np.repeat(r, n_phi)
    pp = np.tile(phi, n_r)
    ww = np.repeat(0.5 * w, n_phi) / n_phi
    return rr * np.cos(pp), rr * np.sin(pp), ww


def _blur_kernel(radius: float, dx: float, dy: float) -> np.ndarray:
    """The uniform disk of ``radius`` on pixels of pitch (dx, dy): exact overlap areas, sum 1."""
    rx, ry = math.ceil(radius / dx - 0.5), math.ceil(radius / dy - 0.5)
    ix, iy = np.arange(-rx, rx + 1), np.arange(-ry, ry + 1)
    area = _disc_rect_area(
        radius,
        ((ix - 0.5) * dx)[None, :],
        ((ix + 0.5) * dx)[None, :],
        ((iy - 0.5) * dy)[:, None],
        ((iy + 0.5) * dy)[:, None],
    )
    return area / area.sum()


def _widened(screen: Screen, mx: int, my: int) -> Screen | None:
    """``screen`` with ``mx``, ``my`` more pixels of the same pitch on each side, or None."""
    ny, nx = screen.shape_px()
    nx2, ny2 = nx + 2 * mx, ny + 2 * my
    if max(nx2, ny2) > MAX_SCREEN_SAMPLES:
        return None
    try:
        out = Screen(
            distance=screen.distance,
            width=nx2 * (screen.width / nx),
            height=ny2 * (screen.height / ny),
            x=screen.x,
            y=screen.y,
            samples=nx2,
            lens_focal_length=screen.lens_focal_length,
        )
    except ValueError:  # beyond the model's bounds
        return None
    # The aspect rule must give back every row, or the pitch in y would change.
    return out if out.shape_px() == (ny2, nx2) else None


def _margins(screen: Screen, radius: float) -> tuple[int, int]:
    ny, nx = screen.shape_px()
    return (
        math.ceil(radius / (screen.width / nx) - 0.5),
        math.ceil(radius / (screen.height / ny) - 0.5),
    )


# --------------------------------------------------------------------------- the route


@dataclass
class Route:
    """How a partially coherent setup is summed; see :func:`route`.

    ``wavelengths``/``weights`` sample the spectrum; ``directions`` (δα, δβ, w)
    sample the source disk (one direction when it is point-like or when ``shift``
    takes the exact route, blurring by ``blur_radius`` on the screen plane).
    """

    plan: Plan
    wavelengths: np.ndarray
    weights: np.ndarray
    spectral: spectrum.SpectralSamples | None
    radius: float
    shift: bool
    blur_radius: float
    directions: tuple[np.ndarray, np.ndarray, np.ndarray]
    directions_needed: int
    phase_across_source: float
    path_difference: float
    subsamples: int = 0
    tiles: list = field(default_factory=list)
    finest_period: float = math.inf

    @property
    def components(self) -> int:
        return int(self.wavelengths.size * self.directions[2].size)


def route(setup: Setup, *, memory_limit: int = DEFAULT_MEMORY_LIMIT) -> Route:
    """Plan the sums of ``setup`` without propagating anything.

    Raises
    ------
    SetupError
        When the setup breaks a rule, needs too much memory, or would need more than
        :data:`MAX_COMPONENTS` monochromatic screens.
    """
    problems = setup.check()
    if problems:
        raise SetupError(*problems[0])
    src = setup.source
    nominal = _with(setup, source=_mono_source(src, src.wavelength))
    p = planning.plan(nominal, memory_limit=memory_limit)
    boxes = _windows(setup)
    path = 0.0
    spec = None
    if src.spectrum != "none" and src.bandwidth > 0.0:
        path = max_path_difference(nominal, boxes)
        lo, hi = spectrum.support(src.spectrum, src.wavelength, src.bandwidth)
        visible = hi > VISIBLE[0] and lo < VISIBLE[1]
        spec = spectrum.sample(
            src.spectrum,
            src.wavelength,
            src.bandwidth,
            count=src.spectral_samples,
            path_difference=path,
            max_step=COLOUR_STEP if visible else None,
        )
        lams, wts = spec.wavelengths, spec.weights
    else:
        lams, wts = np.array([src.wavelength]), np.array([1.0])
    radius = math.sin(0.5 * src.source_diameter)
    z = setup.screen.distance
    blur = z * radius
    shift = (
        radius > 0.0
        and src.kind in SHIFT_INVARIANT_KINDS
        and p.method in PARAXIAL_METHODS
        and _widened(setup.screen, *_margins(setup.screen, blur)) is not None
    )
    v = 2.0 * math.pi / float(lams.min()) * _baseline(nominal, boxes) * radius
    k_r, k_phi = _disk_rule(v) if radius > 0 else (1, 1)
    needed_dirs = k_r * k_phi
    r = Route(
        plan=p,
        wavelengths=lams,
        weights=wts,
        spectral=spec,
        radius=radius,
        shift=shift,
        blur_radius=blur if radius > 0 else 0.0,
        directions=disk_directions(radius, v) if radius > 0 and not shift else _one(),
        directions_needed=1 if shift or radius == 0 else needed_dirs,
        phase_across_source=v,
        path_difference=path,
    )
    if r.directions[2].size > MAX_AUTO_DIRECTIONS:
        r.directions = _capped_directions(radius)
    if setup.camera is not None:
        _plan_camera(setup, r)
        c = setup.camera
        work = float(c.pixels_x * c.pixels_y) * r.subsamples**2 * r.components
        if work > MAX_SENSOR_SAMPLES:
            raise SetupError(
                "camera.pixels_x",
                f"the frame needs {work:.3g} sub-pixel samples ({c.pixels_x} × {c.pixels_y} "
                f"pixels × {r.subsamples}² samples each × {r.components} wavelengths and "
                f"directions), over the {MAX_SENSOR_SAMPLES:.3g} limit; use fewer pixels, "
                "fewer spectral samples or a smaller source",
            )
    if r.components > MAX_COMPONENTS:
        where = "source.source_diameter" if r.directions[2].size > 1 else "source.spectral_samples"
        raise SetupError(
            where,
            f"the sum needs {r.wavelengths.size} wavelengths × {r.directions[2].size} source "
            f"directions = {r.components} screens, over the {MAX_COMPONENTS} limit; narrow "
            "the spectrum, shrink the source or the aperture",
        )
    return r


def _one():
    return np.zeros(1), np.zeros(1), np.ones(1)


def _capped_directions(radius: float):
    """The finest disk rule within :data:`MAX_AUTO_DIRECTIONS` directions."""
    v = 1.0
    while True:
        k_r, k_phi = _disk_rule(v + 1.0)
        if k_r * k_phi > MAX_AUTO_DIRECTIONS:
            return disk_directions(radius, v)
        v += 1.0


def _finest_period(setup: Setup, box, wavelength: float) -> float:
    """Finest fringe period the pattern can hold in ``box``, as the planner's report has it."""
    w, h = box[1] - box[0], box[3] - box[2]
    probe = Setup(
        source=_mono_source(setup.source, wavelength),
        aperture=setup.aperture,
        screen=Screen(
            distance=setup.screen.distance,
            width=w,
            height=h,
            x=0.5 * (box[0] + box[1]),
            y=0.5 * (box[2] + box[3]),
            samples=2,
            lens_focal_length=setup.screen.lens_focal_length,
        ),
        numerics=setup.numerics,
    )
    g = planning._geometry(probe)
    if g.lit is None:
        return math.inf
    return float(planning._finest_period(g, planning._lit_with_taper(g)))


def _plan_camera(setup: Setup, r: Route) -> None:
    c = setup.camera
    r.finest_period = _finest_period(setup, cam.sensor_box(c), float(r.wavelengths.min()))
    k = cam.subsamples(c.pixel_pitch, r.finest_period)
    h = c.pixel_pitch / k
    extra = math.ceil(r.blur_radius / h - 0.5) if r.shift else 0
    args = {"lens_focal_length": setup.screen.lens_focal_length}
    try:
        r.tiles = cam.tiles(c, setup.screen.distance, k, extra=extra, **args)
    except ValueError:
        # The blur of the source is too wide for a tile: sample the source instead.
        r.shift = False
        r.directions = disk_directions(r.radius, r.phase_across_source)
        k_r, k_phi = _disk_rule(r.phase_across_source)
        r.directions_needed = k_r * k_phi
        if r.directions[2].size > MAX_AUTO_DIRECTIONS:
            r.directions = _capped_directions(r.radius)
        r.tiles = cam.tiles(c, setup.screen.distance, k, **args)
    r.subsamples = k


class _NotShiftInvariant(Exception):
    """A widened window was planned with a non-paraxial method: sample the source."""


# --------------------------------------------------------------------------- the sums


def _memo(memo: dict, objs: tuple, build):
    """``build()`` once per tuple of objects ``objs`` (by identity) in ``memo``."""
    k = tuple(id(o) for o in objs)
    hit = memo.get(k)
    if hit is None:
        hit = memo[k] = (objs, build())  # the objects are kept, so their ids stay theirs
    return hit[1]


def _on_screen(memo: dict, comp: Setup, screen: Screen) -> Setup:
    """``comp`` on another screen, made once per pair (the source shared, so it follows)."""
    return _memo(memo, (comp, screen), lambda: _with(comp, screen=screen))


def _irradiance(comp: Setup, r: Route, memo: dict, memory_limit: int) -> tuple:
    """Irradiance of the monochromatic component ``comp`` on its screen's pixels, and its result.

    ``memo`` lives for one sum: the transmittance on the latest grid, the widened
    screens and the blur kernels are made once for all components.
    """
    from . import engine  # here, not at the top: the engine delegates to this module

    samples = memo.setdefault("samples", {})
    if not (r.shift and r.blur_radius > 0.0):
        res = engine.monochromatic(comp, memory_limit=memory_limit, samples=samples)
        return res.intensity, res
    screen = comp.screen
    wide = _memo(memo, (screen,), lambda: _widened(screen, *_margins(screen, r.blur_radius)))
    if wide is None:
        raise _NotShiftInvariant
    res = engine.monochromatic(
        _on_screen(memo, comp, wide), memory_limit=memory_limit, samples=samples
    )
    if res.plan.method not in PARAXIAL_METHODS:
        raise _NotShiftInvariant
    ny, nx = screen.shape_px()
    pitch = (screen.width / nx, screen.height / ny)
    kern = memo.get(("kernel", pitch))
    if kern is None:
        kern = memo["kernel", pitch] = _blur_kernel(r.blur_radius, *pitch)
    out = signal.fftconvolve(res.intensity, kern, mode="valid")
    return np.maximum(out, 0.0), res  # the FFT leaves rounding below zero in dark fringes


def _components(setup: Setup, r: Route):
    """(setup, weight, wavelength) of every monochromatic component of ``setup``.

    One camera-less, monochromatic setup per source direction, tuned in place to
    each wavelength in turn: building a param instance costs as much as a small
    propagation, setting a wavelength next to nothing. Each setup is valid until the
    next item.
    """
    da, db, dw = r.directions
    for a, b, w in zip(da, db, dw, strict=True):
        src = _mono_source(setup.source, r.wavelengths[0], a, b)
        comp = _with(setup, source=src)
        for lam, wl in zip(r.wavelengths, r.weights, strict=True):
            checkpoint()  # a newer request of the same user stops the sum here
            src.wavelength = float(lam)
            yield comp, float(wl * w), float(lam)


class _WeightedSums:
    """Several weighted sums Σ_k w_ik S_k of the same screens S_k, in blocks.

    Screens are stacked into a block of at most ``block_bytes`` and each full block
    is added as one matrix product of its weights with it, which reads every screen
    once for all sums (the irradiance and X, Y, Z) where separate multiply-adds
    would read it once per sum.
    """

    def __init__(self, shape: tuple[int, int], sums: int, count: int, block_bytes=32 << 20):
        self.shape = shape
        n = shape[0] * shape[1]
        self.total = np.zeros((sums, n))
        self.size = max(1, min(count, block_bytes // (8 * n)))
        self.block = np.empty((self.size, n)) if self.size > 1 else None
        self.weights = np.empty((sums, self.size))
        self.filled = 0

    def add(self, screen: np.ndarray, weights) -> None:
        if self.block is None:  # one screen per block: add it in place, nothing stacked
            for row, w in zip(self.total, weights, strict=True):
                row += w * screen.ravel()
            return
        self.block[self.filled] = screen.ravel()
        self.weights[:, self.filled] = weights
        self.filled += 1
        if self.filled == self.size:
            self._flush()

    def _flush(self) -> None:
        if self.filled:
            self.total += self.weights[:, : self.filled] @ self.block[: self.filled]
            self.filled = 0

    def result(self) -> np.ndarray:
        """The sums, (sums, ny, nx)."""
        self._flush()
        return self.total.reshape(-1, *self.shape)


def _screen_sum(setup: Setup, r: Route, memory_limit: int) -> dict:
    colours = r.wavelengths.size > 1
    sums = _WeightedSums(setup.screen.shape_px(), 4 if colours else 1, r.components)
    power: float | None = 0.0
    single = None
    memo: dict = {}
    for comp, w, lam in _components(setup, r):
        inten, res = _irradiance(comp, r, memo, memory_limit)
        sums.add(inten, (w, *(w * colour.cmf(lam))) if colours else (w,))
        power = None if power is None or res.power_in is None else power + w * res.power_in
        single = res
    total = sums.result()
    coherent = r.components == 1 and not (r.shift and r.blur_radius > 0)
    return {
        "intensity": total[0],
        "xyz": np.moveaxis(total[1:], 0, -1).astype(np.float32) if colours else None,
        "power_in": power,
        "field": single.field if coherent else None,
    }


def _sensor_sum(setup: Setup, r: Route, memory_limit: int) -> tuple[np.ndarray, float]:
    """Photons per second on each pixel's active area, and the power on the whole sensor."""
    c = setup.camera
    k = r.subsamples
    active = cam.box_stencil(k, math.sqrt(c.fill_factor))
    whole = cam.box_stencil(k, 1.0)
    rate = np.zeros((c.pixels_y, c.pixels_x))
    power = 0.0
    memo: dict = {}
    for comp, w, lam in _components(setup, r):
        per_photon = lam / (cam.PLANCK * cam.LIGHT_SPEED)
        for t in r.tiles:
            checkpoint()
            inten, _ = _irradiance(_on_screen(memo, comp, t.screen), r, memo, memory_limit)
            shape = (t.j1 - t.j0, t.i1 - t.i0)
            energy = cam.integrate_pixels(inten, k, shape, active, c.pixel_pitch)
            rate[t.j0 : t.j1, t.i0 : t.i1] += (w * per_photon) * energy
            power += w * float(cam.integrate_pixels(inten, k, shape, whole, c.pixel_pitch).sum())
    return rate, power


def _light_key(setup: Setup) -> str:
    """What the light on the screen and the sensor depends on: all but the read-out settings."""
    from .snapshot import physics_hash

    c = setup.camera
    values = {n: getattr(c, n) for n in c.param if n not in ("name", *_DIGITISATION_KEYS)}
    probe = Setup(
        source=setup.source,
        aperture=setup.aperture,
        screen=setup.screen,
        numerics=setup.numerics,
        camera=Camera(**values),
    )
    return "light:" + physics_hash(probe)


@dataclass
class _Light:
    """The propagated light of one setup: the screen sums and the photon rates on the sensor."""

    route: Route
    intensity: np.ndarray
    xyz: np.ndarray | None
    power_in: float | None
    field: np.ndarray | None  # the one component's field, when there is only one
    rate: np.ndarray | None = None  # photons per second on each pixel's active area
    on_sensor: float = 0.0  # W on the whole sensor


def _propagated(setup: Setup, r: Route, memory_limit: int) -> _Light:
    """Every propagation of ``setup`` on route ``r``, or on the sampled route when the
    exact blur turns out not to hold (a widened window planned non-paraxially)."""
    try:
        return _light_on(setup, r, memory_limit)
    except _NotShiftInvariant:
        return _light_on(setup, _sampled(setup, r), memory_limit)


def _light_on(setup: Setup, r: Route, memory_limit: int) -> _Light:
    screen = _screen_sum(setup, r, memory_limit)
    light = _Light(r, **screen)
    if setup.camera is not None:
        light.rate, light.on_sensor = _sensor_sum(setup, r, memory_limit)
    return light


def _stored(setup: Setup, r: Route, memory_limit: int, use_cache: bool, store) -> _Light:
    """:func:`_propagated`, cached apart from the camera's read-out settings.

    With a camera, a change of exposure, gain or noise then recomputes no
    propagation; without one, the caller caches the whole result.
    """
    from . import engine

    if setup.camera is None or not use_cache:
        return _propagated(setup, r, memory_limit)
    key = _light_key(setup)
    hit = store.get(key)
    if hit is not None:
        e = hit.extras
        return _Light(
            route=_sampled(setup, r) if r.shift and not bool(e["shift"]) else r,
            intensity=hit.intensity,
            xyz=e.get("xyz"),
            power_in=hit.power_in,
            field=hit.field if hit.field.size else None,
            rate=e["rate"],
            on_sensor=float(e["power_on_sensor"]),
        )
    light = _propagated(setup, r, memory_limit)
    x, y = planning.screen_axes(setup)
    extras = {
        "rate": light.rate,
        "power_on_sensor": np.array(light.on_sensor),
        "shift": np.array(light.route.shift),
    }
    if light.xyz is not None:
        extras["xyz"] = light.xyz
    store.put(
        key,
        engine.Result(
            x=x,
            y=y,
            intensity=light.intensity,
            field=light.field if light.field is not None else np.zeros(0, np.complex128),
            plan=light.route.plan,
            power_in=light.power_in,
            elapsed_s=0.0,
            key=key,
            extras=extras,
        ),
    )
    return light


# --------------------------------------------------------------------------- the report


def _verdict_low(value: float, limits=(1.0, 0.5)) -> str:
    if value >= limits[0]:
        return "ok"
    return "marginal" if value >= limits[1] else "invalid"


def _nm(m: float) -> str:
    return f"{m * 1e9:.4g} nm"


def _spectral_item(setup: Setup, r: Route) -> ValidityItem:
    s = r.spectral
    src = setup.source
    ratio = s.count / s.needed
    width = "FWHM" if s.kind == "gaussian" else "full width"
    lc = spectrum.coherence_length(src.wavelength, src.bandwidth)
    return ValidityItem(
        "spectral_sampling",
        "Spectral samples over those needed",
        ratio,
        1.0,
        "",
        _verdict_low(ratio),
        f"A {s.kind} spectrum ({width} {_nm(src.bandwidth)} about {_nm(src.wavelength)}, "
        f"coherence length λ²/Δλ = {planning.length_text(lc)}) is summed over {s.count} "
        f"wavelengths; path differences up to {planning.length_text(s.path_difference)} "
        f"need {s.needed}.",
    )


def _source_item(setup: Setup, r: Route) -> ValidityItem:
    theta = setup.source.source_diameter
    if r.shift:
        return ValidityItem(
            "source_sampling",
            "Source directions over those needed",
            math.inf,
            1.0,
            "",
            "ok",
            f"The source ({theta:.3g} rad across) is summed exactly: this setup is "
            "shift-invariant, so its pattern is the point-source one blurred by a disk "
            f"{planning.length_text(2 * r.blur_radius)} across on the screen.",
        )
    n = int(r.directions[2].size)
    ratio = n / r.directions_needed
    return ValidityItem(
        "source_sampling",
        "Source directions over those needed",
        ratio,
        1.0,
        "",
        _verdict_low(ratio),
        f"The source ({theta:.3g} rad across) is sampled in {n} directions; the widest "
        f"aperture baseline sees {r.phase_across_source:.3g} rad of phase across it and "
        f"needs {r.directions_needed}.",
    )


def _reasons(setup: Setup, r: Route) -> list[str]:
    out = []
    if r.spectral is not None:
        out.append(
            f"incoherent sum over {r.wavelengths.size} wavelengths from "
            f"{_nm(r.wavelengths.min())} to {_nm(r.wavelengths.max())}, each propagated at "
            "its own wavelength onto the same screen pixels"
        )
    if r.radius > 0:
        out.append(
            f"source {setup.source.source_diameter:.3g} rad across: "
            + (
                f"shift-invariant, the pattern is blurred by the source's disk "
                f"(radius {planning.length_text(r.blur_radius)} on the screen)"
                if r.shift
                else f"incoherent sum over {r.directions[2].size} directions of the source"
            )
        )
    if r.components > 1 or r.shift:
        out.append("partially coherent: the field holds √irradiance, its phase is not defined")
    if setup.camera is not None:
        c = setup.camera
        out.append(
            f"camera {c.pixels_x} × {c.pixels_y} pixels of {planning.length_text(c.pixel_pitch)}: "
            f"the irradiance is integrated over each pixel's active area from {r.subsamples} × "
            f"{r.subsamples} samples per pixel ({len(r.tiles)} tile(s))"
        )
    return out


def _pre_items(setup: Setup, r: Route) -> list[ValidityItem]:
    items = []
    if r.spectral is not None:
        items.append(_spectral_item(setup, r))
    if r.radius > 0:
        items.append(_source_item(setup, r))
    return items


def check(setup: Setup, *, memory_limit: int = DEFAULT_MEMORY_LIMIT) -> Plan:
    """The plan of ``setup`` with the report lines that need no propagation.

    For a setup that :func:`needed` says is partially coherent or has a camera:
    the central wavelength's plan, plus ``spectral_sampling``, ``source_sampling``
    and ``camera_sampling``. The exposure and coverage of the camera need the
    computation itself (:func:`compute`).
    """
    if not needed(setup):
        return planning.plan(setup, memory_limit=memory_limit)
    r = route(setup, memory_limit=memory_limit)
    items = _pre_items(setup, r)
    if setup.camera is not None:
        items.append(cam.sampling_item(setup.camera, r.finest_period))
    return replace(
        r.plan,
        reasons=[*r.plan.reasons, *_reasons(setup, r)],
        validity=[*r.plan.validity, *items],
    )


def describe(setup: Setup, *, memory_limit: int = DEFAULT_MEMORY_LIMIT) -> dict:
    """What a computation of ``setup`` will sum, without propagating (JSON-ready).

    Keys: ``wavelengths`` (m) and ``weights`` of the spectrum, ``spectral_samples_needed``,
    ``path_difference`` (m), ``coherence_length`` (m, None when monochromatic),
    ``source_route`` (``'point'``, ``'shift'`` or ``'sampled'``), ``blur_radius`` (m),
    ``directions``, ``directions_needed``, ``components`` (monochromatic screens),
    ``camera_subsamples`` and ``camera_tiles`` (0 without a camera).
    """
    r = route(setup, memory_limit=memory_limit)
    src = setup.source
    broad = r.spectral is not None
    return {
        "wavelengths": [float(v) for v in r.wavelengths],
        "weights": [float(v) for v in r.weights],
        "spectral_samples_needed": r.spectral.needed if broad else 1,
        "path_difference": float(r.path_difference),
        "coherence_length": spectrum.coherence_length(src.wavelength, src.bandwidth)
        if broad
        else None,
        "source_route": "point" if r.radius == 0 else ("shift" if r.shift else "sampled"),
        "blur_radius": float(r.blur_radius),
        "directions": int(r.directions[2].size),
        "directions_needed": int(r.directions_needed),
        "components": r.components,
        "camera_subsamples": r.subsamples,
        "camera_tiles": len(r.tiles),
    }


# --------------------------------------------------------------------------- entry point


def compute(
    setup: Setup,
    *,
    memory_limit: int = DEFAULT_MEMORY_LIMIT,
    use_cache: bool = True,
    cache=None,
    key: str | None = None,
):
    """The screen (and camera frame) of a partially coherent setup, as a Result.

    Called by :func:`compute.engine.compute` for every setup that :func:`needed`
    accepts; each monochromatic component is propagated by
    :func:`compute.engine.monochromatic`, unhashed and uncached. The result holds
    the summed irradiance, √irradiance as its field (the field of the one component
    when there is only one), the central wavelength's plan with the lines of
    :func:`check` and, with a camera, ``camera_coverage`` and ``camera_exposure``.
    ``extras``: ``xyz`` (float32 (ny, nx, 3), the CIE 1931 tristimulus values of a
    broad-band screen), and with a camera ``counts`` (uint16/uint32, (py, px)),
    ``camera_x`` (px,), ``camera_y`` (py,) (pixel centres, m), ``saturated`` (bool)
    and ``electrons`` (float32, the mean photoelectrons before noise). ``key`` is
    the setup's physics hash when the caller has it already.

    Raises
    ------
    SetupError
        As :func:`route`, or when a component cannot be computed.
    """
    from . import engine
    from .snapshot import physics_hash

    t0 = time.perf_counter()
    store = engine.RESULT_CACHE if cache is None else cache
    if key is None:
        key = physics_hash(setup)
    light = _stored(setup, route(setup, memory_limit=memory_limit), memory_limit, use_cache, store)
    r = light.route
    frame = _camera(setup, light) if setup.camera else ({}, [])
    items = _pre_items(setup, r) + frame[1]
    extras: dict = {}
    if light.xyz is not None:
        extras["xyz"] = light.xyz
    extras.update(frame[0])
    x, y = planning.screen_axes(setup)
    inten = light.intensity
    fld = light.field
    if fld is None:
        fld = np.sqrt(inten).astype(np.complex128)
    plan = replace(
        r.plan,
        reasons=[*r.plan.reasons, *_reasons(setup, r)],
        validity=[*r.plan.validity, *items],
    )
    result = engine.Result(
        x=x,
        y=y,
        intensity=inten,
        field=fld,
        plan=plan,
        power_in=light.power_in,
        elapsed_s=time.perf_counter() - t0,
        key=key,
        extras=extras,
    )
    if use_cache:
        store.put(key, result)
    return result


def _sampled(setup: Setup, r: Route) -> Route:
    """``r`` with the source sampled in directions instead of the exact blur."""
    out = replace(r, shift=False)
    out.directions = disk_directions(r.radius, r.phase_across_source)
    k_r, k_phi = _disk_rule(r.phase_across_source)
    out.directions_needed = k_r * k_phi
    if out.directions[2].size > MAX_AUTO_DIRECTIONS:
        out.directions = _capped_directions(r.radius)
    if setup.camera is not None:
        _plan_camera(setup, out)
    return out


def _camera(setup: Setup, light: _Light) -> tuple[dict, list[ValidityItem]]:
    """The camera frame read out from the light on the sensor, and its report lines."""
    c = setup.camera
    frame = cam.digitise(light.rate * c.exposure, c)
    reference = light.power_in
    if reference is None and setup.source.kind == "gaussian":
        reference = setup.source.power
    items = cam.validity_items(
        setup,
        light.route.finest_period,
        light.on_sensor,
        reference,
        frame["electrons"],
        frame["saturated"],
    )
    cx, cy = cam.sensor_axes(c)
    extras = {
        "counts": frame["counts"],
        "camera_x": cx,
        "camera_y": cy,
        "saturated": frame["saturated"],
        "electrons": frame["electrons"].astype(np.float32),
    }
    return extras, items
