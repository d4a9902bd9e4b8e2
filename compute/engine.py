"""Setup in, screen field out: the one entry point of the numerical core.

:func:`compute` plans the computation (:mod:`compute.planning`), samples the
aperture field (:mod:`compute.sources`, :mod:`compute.apertures`), propagates
it (:mod:`compute.propagators`) and returns a :class:`Result`. Results are
cached on the physics of the setup, so a change of display setting or a return
to an earlier setup recomputes nothing.
"""

from __future__ import annotations

import math
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass, field, replace

import numpy as np

from . import __version__, apertures, planning, propagators, sources
from . import fft as _fft
from .errors import SetupError
from .grids import centred_axis
from .model import Setup
from .planning import DEFAULT_MEMORY_LIMIT, Plan

__all__ = [
    "RESULT_CACHE",
    "Result",
    "ResultCache",
    "aperture_preview",
    "check",
    "compute",
    "field_at_points",
    "monochromatic",
]


@dataclass
class Result:
    """A computed screen: coordinates, field, irradiance, and how they were obtained.

    ``x`` and ``y`` are the screen pixel centres; ``field[j, i]`` and
    ``intensity[j, i]`` are the values at the point (``x[i]``, ``y[j]``), point
    samples, not pixel averages (a camera integrates over its pixels instead).
    ``intensity`` is |U|², the irradiance of the local wave in W/m², not projected
    on the screen's normal at oblique angles. ``power_in`` is ∫|U|² dA over the
    aperture plane behind the aperture (None on a clear background); for light at
    an angle θ to the axis the power crossing that plane is ∫|U|² cos θ dA.
    """

    x: np.ndarray
    y: np.ndarray
    intensity: np.ndarray
    field: np.ndarray
    plan: Plan
    power_in: float | None
    elapsed_s: float
    key: str
    cached: bool = False
    # Arrays beyond the monochromatic screen (camera counts, colour image, ...),
    # each a numpy array keyed by the name it has in a rendered NPZ.
    extras: dict = field(default_factory=dict)

    @property
    def method(self) -> str:
        return self.plan.method

    @property
    def validity(self):
        return self.plan.validity

    @property
    def verdict(self) -> str:
        """``'ok'``, ``'marginal'`` or ``'invalid'``: the worst item of the report."""
        return self.plan.verdict

    @property
    def nbytes(self) -> int:
        extra = sum(getattr(v, "nbytes", 0) for v in self.extras.values())
        return int(
            self.x.nbytes + self.y.nbytes + self.intensity.nbytes + self.field.nbytes + extra
        )

    def meta(self) -> dict:
        """The JSON-able description stored beside a rendered result."""
        p = self.plan
        return {
            "method": p.method,
            "variant": p.variant,
            "fresnel_number": float(p.fresnel_number),
            "verdict": p.verdict,
            "grid": [int(p.ny), int(p.nx)],
            "padded": [int(v) for v in p.padded],
            "pitch": [float(p.dy), float(p.dx)],
            "precision": "single" if p.dtype == "complex64" else "double",
            "reasons": list(p.reasons),
            "validity": [v.to_dict() for v in p.validity],
            "app_version": __version__,
            "snapshot_sha256": self.key,
            "elapsed_s": float(self.elapsed_s),
            "power_in": None if self.power_in is None else float(self.power_in),
        }


class ResultCache:
    """A thread-safe least-recently-used cache of results, bounded in bytes."""

    def __init__(self, max_bytes: int = 512 * 1024**2):
        self.max_bytes = max_bytes
        self._items: OrderedDict[str, Result] = OrderedDict()
        self._bytes = 0
        self._lock = threading.Lock()

    def get(self, key: str) -> Result | None:
        with self._lock:
            r = self._items.get(key)
            if r is not None:
                self._items.move_to_end(key)
            return r

    def put(self, key: str, result: Result) -> None:
        size = result.nbytes
        if size > self.max_bytes:
            return
        with self._lock:
            old = self._items.pop(key, None)
            if old is not None:
                self._bytes -= old.nbytes
            self._items[key] = result
            self._bytes += size
            while self._bytes > self.max_bytes and self._items:
                _, dropped = self._items.popitem(last=False)
                self._bytes -= dropped.nbytes

    def clear(self) -> None:
        with self._lock:
            self._items.clear()
            self._bytes = 0

    def __len__(self) -> int:
        return len(self._items)

    @property
    def nbytes(self) -> int:
        return self._bytes


RESULT_CACHE = ResultCache()


def _physics_key(setup: Setup) -> str:
    from .snapshot import physics_hash

    return physics_hash(setup)


def check(setup: Setup, *, memory_limit: int = DEFAULT_MEMORY_LIMIT) -> Plan:
    """Plan ``setup`` and report its validity without propagating anything.

    Partially coherent setups and setups with a camera add their own report lines.
    """
    from . import incoherent

    return incoherent.check(setup, memory_limit=memory_limit)


# --------------------------------------------------------------------------- sampling


def _taper(coord: np.ndarray, lo: float, hi: float, t_lo: float, t_hi: float) -> np.ndarray:
    """1 on [lo, hi], a raised cosine to 0 over t_lo below and t_hi above."""
    w = np.ones_like(coord)
    if t_lo > 0:
        s = np.clip((lo - coord) / t_lo, 0.0, 1.0)
        w *= 0.5 * (1.0 + np.cos(np.pi * s))
    if t_hi > 0:
        s = np.clip((coord - hi) / t_hi, 0.0, 1.0)
        w *= 0.5 * (1.0 + np.cos(np.pi * s))
    return w


# Grids up to this many samples keep their transmittance in a caller's memo; on larger
# ones the propagation dominates and the memo's memory would count against its budget.
_MEMO_SAMPLES = 1 << 20


def _transmittances(
    setup: Setup, p: Plan, x: np.ndarray, y: np.ndarray, samples: dict | None
) -> tuple[np.ndarray, np.ndarray | None]:
    """Quadrature and power transmittance on pixels (x, y), from ``samples`` when it has them.

    Both depend on the aperture and the grid alone, not on the wavelength. The memo
    holds the latest grid only: consecutive wavelengths mostly plan the same one.
    """
    dx, dy = p.dx, p.dy
    grid = (p.babinet, x.size, float(x[0]), dx, y.size, float(y[0]), dy)
    if samples is not None and samples.get("grid") == grid:
        return samples["t"], samples["pt"]
    t = apertures.quadrature_transmittance(setup.aperture, x, y, pitch=(dx, dy))
    if p.babinet:
        t = 1.0 - t
    # Area-weighted |t|², not |T|²: the power that really passes the aperture.
    pt = None if p.babinet else apertures.power_transmittance(setup.aperture, x, y, pitch=(dx, dy))
    if samples is not None and x.size * y.size <= _MEMO_SAMPLES:
        samples.update(grid=grid, t=t, pt=pt)
    return t, pt


def _aperture_field(
    setup: Setup, p: Plan, x: np.ndarray, y: np.ndarray, samples: dict | None = None
) -> tuple[np.ndarray, float | None]:
    """The field leaving the aperture plane on pixels (x, y), and the power it carries.

    The transmittance is given as quadrature weights
    (:func:`compute.apertures.quadrature_transmittance`), so the midpoint sums
    of the propagators integrate hard edges to second order. On a clear
    background this is the field through the complement of the aperture
    (Babinet), to be subtracted from the unobstructed beam, and the power
    through the aperture is unbounded (None).
    """
    t, pt = _transmittances(setup, p, x, y, samples)
    inc = sources.incident_field(setup.source, x, y)
    weight = None
    if p.taper is not None:
        x0, x1, y0, y1 = p.lit_box
        tx = _taper(x, x0, x1, p.taper[0], p.taper[1])
        ty = _taper(y, y0, y1, p.taper[2], p.taper[3])
        weight = ty[:, None] * tx[None, :]
        inc *= weight
    power_in = None
    if pt is not None:
        power_in = float(np.sum((inc.real**2 + inc.imag**2) * pt) * p.dx * p.dy)
    u = inc * t
    return u.astype(p.dtype, copy=False), power_in


def _transform_axes(p: Plan) -> tuple[np.ndarray, np.ndarray]:
    """Pixel centres of the aperture grid of the single-transform routes."""
    x0 = p.grid_centre[0] - 0.5 * p.nx * p.dx
    y0 = p.grid_centre[1] - 0.5 * p.ny * p.dy
    return x0 + (np.arange(p.nx) + 0.5) * p.dx, y0 + (np.arange(p.ny) + 0.5) * p.dy


class _KernelCache:
    """Transfer functions keyed on (kind, shape, pitch, λ, z, dtype), bounded in bytes."""

    def __init__(self, max_bytes: int = 768 * 1024**2):
        self.max_bytes = max_bytes
        self._items: OrderedDict[tuple, np.ndarray] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: tuple, build) -> np.ndarray:
        with self._lock:
            k = self._items.get(key)
            if k is not None:
                self._items.move_to_end(key)
                return k
        k = build()
        with self._lock:
            self._items[key] = k
            total = sum(v.nbytes for v in self._items.values())
            while total > self.max_bytes and len(self._items) > 1:
                _, old = self._items.popitem(last=False)
                total -= old.nbytes
        return k

    def clear(self) -> None:
        with self._lock:
            self._items.clear()


KERNEL_CACHE = _KernelCache()


def _kernel(p: Plan, lam: float, z: float) -> np.ndarray:
    shape = tuple(p.padded)
    key = (p.variant, shape, p.dx, p.dy, lam, z, p.dtype, p.band)
    if p.method == "angular_spectrum":
        return KERNEL_CACHE.get(
            key,
            lambda: propagators.angular_spectrum_kernel(
                shape, p.dx, p.dy, lam, z, band=p.band, dtype=p.dtype
            ),
        )
    return KERNEL_CACHE.get(
        key, lambda: propagators.fresnel_transfer_kernel(shape, p.dx, p.dy, lam, z, dtype=p.dtype)
    )


def _convolution(setup: Setup, p: Plan, xs: np.ndarray, ys: np.ndarray, samples=None) -> tuple:
    big_y, big_x = p.padded
    gx = centred_axis(big_x, p.dx, p.grid_centre[0])
    gy = centred_axis(big_y, p.dy, p.grid_centre[1])
    # Aperture samples only where light passes; zeros elsewhere are the padding.
    box = p.lit_box
    tx = p.taper or (0, 0, 0, 0)
    i0 = max(0, math.floor((box[0] - tx[0] - gx[0]) / p.dx) - 1)
    i1 = min(big_x, math.ceil((box[1] + tx[1] - gx[0]) / p.dx) + 2)
    j0 = max(0, math.floor((box[2] - tx[2] - gy[0]) / p.dy) - 1)
    j1 = min(big_y, math.ceil((box[3] + tx[3] - gy[0]) / p.dy) + 2)
    sub_x, sub_y = gx[i0:i1], gy[j0:j1]
    u, power_in = _aperture_field(setup, p, sub_x, sub_y, samples)
    f = setup.screen.lens_focal_length
    if f is not None:
        ly, lx = propagators.lens_phase(sub_x, sub_y, setup.source.wavelength, f)
        u = u * ly.astype(u.dtype) * lx.astype(u.dtype)
    full = _fft.zeros((big_y, big_x), dtype=p.dtype)
    full[j0:j1, i0:i1] = u
    del u
    lam, z = setup.source.wavelength, setup.screen.distance
    kern = _kernel(p, lam, z)
    if p.output == "grid":
        out = propagators.propagate_fft(full, kern, overwrite=True)
        mx, my = p.step
        ci = round((xs[0] - gx[0]) / p.dx)
        cj = round((ys[0] - gy[0]) / p.dy)
        field = out[cj : cj + my * len(ys) : my, ci : ci + mx * len(xs) : mx]
        if field.shape != (len(ys), len(xs)):
            raise SetupError(
                "screen.width", "the screen window does not fit the planned grid; widen the grid"
            )
        field = field.astype(np.complex128)
    else:
        field = propagators.spectrum_to_points(full, kern, gx, gy, xs, ys, overwrite=True)
    return field, power_in


def _propagate(setup: Setup, p: Plan, xs: np.ndarray, ys: np.ndarray, samples=None) -> tuple:
    lam, z = setup.source.wavelength, setup.screen.distance
    f = setup.screen.lens_focal_length
    if p.variant == "closed_form":
        return np.zeros((len(ys), len(xs)), dtype=np.complex128), 0.0
    if p.method in ("angular_spectrum",) or p.variant == "transfer_function":
        return _convolution(setup, p, xs, ys, samples)
    x, y = _transform_axes(p)
    u, power_in = _aperture_field(setup, p, x, y, samples)
    pitch = (p.dx, p.dy)
    if p.variant == "far_field_nonparaxial":
        field = propagators.rayleigh_sommerfeld_far_field(u, x, y, lam, z, xs, ys, pitch=pitch)
        return field, power_in
    if p.method == "rayleigh_sommerfeld":
        if f is not None:
            ly, lx = propagators.lens_phase(x, y, lam, f)
            u = u * ly * lx
        field = propagators.rayleigh_sommerfeld(
            u, x, y, lam, z, xs[None, :], ys[:, None], pitch=pitch
        )
        return field, power_in
    if p.method == "fraunhofer" and f is None:
        return propagators.fraunhofer(u, x, y, lam, z, xs, ys, pitch=pitch), power_in
    return (
        propagators.fresnel_impulse_response(u, x, y, lam, z, xs, ys, focal_length=f, pitch=pitch),
        power_in,
    )


# --------------------------------------------------------------------------- entry points


def compute(
    setup: Setup,
    *,
    memory_limit: int = DEFAULT_MEMORY_LIMIT,
    use_cache: bool = True,
    cache: ResultCache | None = None,
) -> Result:
    """Compute the screen field of ``setup``.

    Parameters
    ----------
    setup
        The whole bench.
    memory_limit
        Largest estimated working memory, bytes; a larger setup is refused
        before anything is allocated.
    use_cache
        Return a cached result for the same physics when there is one.
    cache
        The cache to use; the module's shared :data:`RESULT_CACHE` by default.

    Raises
    ------
    SetupError
        When the setup cannot be computed as it stands; nothing is cached.
    """
    t0 = time.perf_counter()
    store = RESULT_CACHE if cache is None else cache
    key = _physics_key(setup)
    if use_cache:
        hit = store.get(key)
        if hit is not None:
            return replace(hit, cached=True, elapsed_s=time.perf_counter() - t0)
    from . import incoherent  # here: it calls back into monochromatic() for each component

    if incoherent.needed(setup):  # spectrum, source size or camera: a sum of coherent runs
        return incoherent.compute(
            setup, memory_limit=memory_limit, use_cache=use_cache, cache=store, key=key
        )
    result = monochromatic(setup, memory_limit=memory_limit, key=key)
    result.elapsed_s = time.perf_counter() - t0
    if use_cache:
        store.put(key, result)
    return result


def monochromatic(
    setup: Setup,
    *,
    memory_limit: int = DEFAULT_MEMORY_LIMIT,
    key: str = "",
    samples: dict | None = None,
) -> Result:
    """The screen of a monochromatic point-like ``setup``: plan and propagate, uncached.

    The coherent step under :func:`compute`, which hashes and caches; the sums of
    :mod:`compute.incoherent` call it once per component, whose results are never
    looked up again. ``samples`` is a memo, kept by the caller across components
    of one aperture, of the transmittance sampled on the latest grid: wavelengths
    that plan the same grid sample the aperture once (see :func:`_aperture_field`).

    Raises
    ------
    ValueError
        When ``setup`` has a spectrum, a source size or a camera: those are sums,
        which :func:`compute` does.
    SetupError
        When the setup cannot be computed as it stands.
    """
    from . import incoherent

    if incoherent.needed(setup):
        raise ValueError("monochromatic() takes a monochromatic point-like setup; use compute()")
    t0 = time.perf_counter()
    p = planning.plan(setup, memory_limit=memory_limit)
    xs, ys = planning.screen_axes(setup)
    field, power_in = _propagate(setup, p, xs, ys, samples)
    field = np.asarray(field, dtype=np.complex128)
    if p.babinet:
        paraxial = p.method in ("fraunhofer", "fresnel")
        bg = sources.free_field(
            setup.source,
            xs,
            ys,
            setup.screen.distance,
            lens_focal_length=setup.screen.lens_focal_length,
            paraxial=paraxial,
        )
        field = bg - field
        power_in = None
    intensity = field.real**2 + field.imag**2
    return Result(
        x=xs,
        y=ys,
        intensity=intensity,
        field=field,
        plan=p,
        power_in=power_in,
        elapsed_s=time.perf_counter() - t0,
        key=key,
    )


def field_at_points(setup: Setup, px, py, *, grid_pitch: float | None = None) -> np.ndarray:
    """Rayleigh–Sommerfeld field of ``setup`` at chosen points on the screen plane.

    The slow, exact reference: direct summation over the aperture samples
    (Goodman §3.5). ``grid_pitch`` sets the aperture sampling (default: a
    quarter wavelength, capped to 4096 samples per side over the lit region).
    """
    g = planning._geometry(setup)
    if g.lit is None:
        return np.zeros(np.broadcast(np.asarray(px), np.asarray(py)).shape, complex)
    box = planning._lit_with_taper(g)
    lam = setup.source.wavelength
    w, h = box[1] - box[0], box[3] - box[2]
    d = grid_pitch or max(lam / 4.0, max(w, h) / 4096)
    nx, ny = max(2, math.ceil(w / d)), max(2, math.ceil(h / d))
    dx, dy = w / nx, h / ny
    x = box[0] + (np.arange(nx) + 0.5) * dx
    y = box[2] + (np.arange(ny) + 0.5) * dy
    p = Plan(
        method="rayleigh_sommerfeld",
        variant="direct",
        nx=nx,
        ny=ny,
        dx=dx,
        dy=dy,
        padded=(ny, nx),
        reasons=[],
        memory_bytes=0,
        fresnel_number=0.0,
        lit_box=g.lit,
        taper=(
            tuple(planning._taper_width(g) if u else 0.0 for u in g.unbounded)
            if any(g.unbounded)
            else None
        ),
        babinet=g.babinet,
        dtype="complex128",
    )
    u, _ = _aperture_field(setup, p, x, y)
    f = setup.screen.lens_focal_length
    if f is not None:
        ly, lx = propagators.lens_phase(x, y, lam, f)
        u = u * ly * lx
    z = setup.screen.distance
    out = propagators.rayleigh_sommerfeld(u, x, y, lam, z, px, py, pitch=(dx, dy))
    if g.babinet:
        pxa, pya = np.broadcast_arrays(np.asarray(px, float), np.asarray(py, float))
        bg = np.empty(pxa.shape, complex)
        for idx in np.ndindex(pxa.shape):
            bg[idx] = sources.free_field(
                setup.source,
                np.array([pxa[idx]]),
                np.array([pya[idx]]),
                z,
                lens_focal_length=f,
                paraxial=False,
            )[0, 0]
        out = bg - out
    return out


def aperture_preview(setup: Setup, n: int = 256) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The aperture transmittance on an ``n``-sample view of its bounds (x, y, t)."""
    box = apertures.aperture_bounds(setup.aperture)
    if box is None or not all(math.isfinite(v) for v in box):
        s = setup.screen
        half = 0.5 * max(s.width, s.height)
        fin = box if box is not None else (-half, half, -half, half)
        box = tuple(
            v if math.isfinite(v) else (-half if i % 2 == 0 else half) for i, v in enumerate(fin)
        )
    cx, cy = 0.5 * (box[0] + box[1]), 0.5 * (box[2] + box[3])
    half = 0.55 * max(box[1] - box[0], box[3] - box[2])
    if half <= 0:
        half = 1e-3
    d = 2 * half / n
    x = cx - half + (np.arange(n) + 0.5) * d
    y = cy - half + (np.arange(n) + 0.5) * d
    t = apertures.transmittance(setup.aperture, x, y, pitch=(d, d))
    return x, y, t
