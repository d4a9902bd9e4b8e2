"""A camera on the screen plane: pixel-area integration, photoelectrons, digital numbers.

The sensor is a grid of square pixels of pitch p. Each pixel collects the light on
its active area, a centred square of side p√F (F the fill factor): the energy it
receives in an exposure t is t ∫∫_active I dA, not t·I at its centre. The
irradiance is computed on a grid k times finer than the pixels (k odd, chosen so
that the finest fringe spans at least :data:`SUBSAMPLES_PER_FRINGE` samples) and
integrated over each active square with exact weights for the piecewise-cubic
interpolant of the samples, so that the integral holds to fourth order in the
sample pitch, also where the active edge cuts a sample cell.

The photons become photoelectrons with the quantum efficiency η,
N = η t ∫∫ I dA / (h c / λ) (summed over the wavelengths of a broad-band source),
drawn from a Poisson distribution when shot noise is on; a pixel holds at most the
full well N_fw (it saturates), read noise adds a Gaussian of σ_read electrons, and
the analogue-to-digital converter gives DN = round(N (2^b − 1) / N_fw), clipped to
[0, 2^b − 1]; round is to the nearest integer with ties to even (``numpy.rint``,
IEEE 754 roundTiesToEven): 2.5 → 2, 3.5 → 4.

References
----------
.. [J] J. R. Janesick, *Photon Transfer*, SPIE Press (2007): the signal chain from
   photons to digital numbers, shot and read noise, full well.
.. [E] EMVA Standard 1288, *Standard for Characterization of Image Sensors and
   Cameras*, release 4.0 (2021): the linear camera model (quantum efficiency,
   gain, saturation, temporal noise).
.. [SI] BIPM, *The International System of Units*, 9th ed. (2019): the exact
   values of h and c.
.. [DR] P. J. Davis and P. Rabinowitz, *Methods of Numerical Integration*, 2nd ed.
   (1984), ch. 2 (integration of interpolating polynomials).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from .model import Camera, Screen, Setup
from .planning import ValidityItem, length_text

__all__ = [
    "LIGHT_SPEED",
    "PLANCK",
    "SUBSAMPLES_PER_FRINGE",
    "Tile",
    "box_stencil",
    "digitise",
    "frame_summary",
    "full_scale",
    "histogram",
    "integrate_pixels",
    "photon_energy",
    "sensor_axes",
    "sensor_box",
    "subsamples",
    "tiles",
    "validity_items",
]

PLANCK = 6.62607015e-34  # J s, exact (SI 2019)
LIGHT_SPEED = 299_792_458.0  # m/s, exact
SUBSAMPLES_PER_FRINGE = 10
MIN_SUBSAMPLES = 3
MAX_SUBSAMPLES = 21
STENCIL_MARGIN = 2  # samples beyond a tile's pixels, so every cubic has its four nodes
TILE_SAMPLES = 2048  # largest tile side, samples (the engine's screen holds 4096)
MAX_SCREEN_SAMPLES = 4096

COVERAGE_LIMITS = (0.9, 0.5)  # fraction of the light on the sensor: ok, marginal
SAMPLING_LIMITS = (1.0, 0.5)  # finest fringe over two pixels: ok, marginal


def photon_energy(wavelength: npt.ArrayLike) -> np.ndarray:
    """Energy h c / λ of one photon, J."""
    return PLANCK * LIGHT_SPEED / np.asarray(wavelength, dtype=np.float64)


def full_scale(camera: Camera) -> int:
    """The largest digital number, 2^bits − 1."""
    return (1 << int(camera.bit_depth)) - 1


def sensor_box(camera: Camera) -> tuple[float, float, float, float]:
    """The sensor's outline on the screen plane (x0, x1, y0, y1), m."""
    w = camera.pixels_x * camera.pixel_pitch
    h = camera.pixels_y * camera.pixel_pitch
    return (
        camera.offset_x - 0.5 * w,
        camera.offset_x + 0.5 * w,
        camera.offset_y - 0.5 * h,
        camera.offset_y + 0.5 * h,
    )


def sensor_axes(camera: Camera) -> tuple[np.ndarray, np.ndarray]:
    """Pixel centres (x, y) of the sensor, m; ``counts[j, i]`` is at (x[i], y[j])."""
    x0, _, y0, _ = sensor_box(camera)
    p = camera.pixel_pitch
    return (
        x0 + (np.arange(camera.pixels_x) + 0.5) * p,
        y0 + (np.arange(camera.pixels_y) + 0.5) * p,
    )


def subsamples(pixel_pitch: float, finest_period: float) -> int:
    """Samples per pixel side: odd, ≥ 3, fine enough for the finest fringe period.

    The sample pitch p/k is at most 1/:data:`SUBSAMPLES_PER_FRINGE` of the finest
    period, up to :data:`MAX_SUBSAMPLES` (a fringe much finer than a pixel averages
    out over it, and the sampling item of the report says so).
    """
    if not (math.isfinite(finest_period) and finest_period > 0):
        return MIN_SUBSAMPLES
    k = math.ceil(SUBSAMPLES_PER_FRINGE * pixel_pitch / finest_period - 1e-9)
    k = max(MIN_SUBSAMPLES, min(MAX_SUBSAMPLES, k))
    return k if k % 2 else k + 1


def _cubic_basis_integrals(ta: float, tb: float) -> np.ndarray:
    """∫_ta^tb L_q(t) dt for the cubic Lagrange basis on the nodes t = −1, 0, 1, 2."""
    nodes = (-1.0, 0.0, 1.0, 2.0)
    out = np.empty(4)
    for q, dq in enumerate(nodes):
        o = [d for r, d in enumerate(nodes) if r != q]
        e1 = o[0] + o[1] + o[2]
        e2 = o[0] * o[1] + o[0] * o[2] + o[1] * o[2]
        e3 = o[0] * o[1] * o[2]
        denom = (dq - o[0]) * (dq - o[1]) * (dq - o[2])

        def prim(t: float, e1=e1, e2=e2, e3=e3) -> float:
            return t**4 / 4 - e1 * t**3 / 3 + e2 * t**2 / 2 - e3 * t

        out[q] = (prim(tb) - prim(ta)) / denom
    return out


def box_stencil(k: int, active: float, margin: int = STENCIL_MARGIN) -> tuple[int, np.ndarray]:
    """Weights that integrate the samples over the active part of the first pixel.

    The samples sit at u = 0, 1, 2, … (in units of the sample pitch); the first
    pixel spans u ∈ [margin − ½, margin − ½ + k] and its active part is the centred
    fraction ``active`` (= √F) of that. Returns ``(start, w)`` with
    ``∫_active f du ≈ Σ_q w[q] f[start + q]``, exact for the piecewise-cubic
    interpolant (each sample interval [m, m + 1] interpolated through samples
    m − 1 … m + 2), so exact for any cubic polynomial. Pixel i uses the same
    weights from ``start + i·k``. The weights sum to ``active · k``.

    References
    ----------
    Davis & Rabinowitz (1984), ch. 2: integration of an interpolating polynomial.
    """
    if margin < STENCIL_MARGIN:
        raise ValueError(f"the margin must be ≥ {STENCIL_MARGIN} samples, got {margin}")
    if not 0 < active <= 1:
        raise ValueError(f"the active fraction must be in (0, 1], got {active!r}")
    a0 = margin - 0.5 + 0.5 * k * (1.0 - active)
    a1 = margin - 0.5 + 0.5 * k * (1.0 + active)
    start = math.floor(a0) - 1
    stop = math.ceil(a1) + 2
    w = np.zeros(stop - start)
    m = math.floor(a0)
    while m < a1:
        ta, tb = max(a0, m) - m, min(a1, m + 1) - m
        if tb > ta:
            w[m - 1 - start : m + 3 - start] += _cubic_basis_integrals(ta, tb)
        m += 1
    nz = np.nonzero(w)[0]
    return start + int(nz[0]), w[nz[0] : nz[-1] + 1]


def _integrate_axis(f: np.ndarray, axis: int, n: int, k: int, stencil) -> np.ndarray:
    start, w = stencil
    f = np.moveaxis(f, axis, -1)
    out = np.zeros((*f.shape[:-1], n))
    for q, wq in enumerate(w):
        s = start + q
        out += wq * f[..., s : s + k * (n - 1) + 1 : k]
    return np.moveaxis(out, -1, axis)


def integrate_pixels(
    samples: np.ndarray, k: int, shape: tuple[int, int], stencil, pitch: float
) -> np.ndarray:
    """Integrals of the irradiance over each pixel's active square, W (or per second).

    ``samples`` (ny·k + 2M, nx·k + 2M) holds the irradiance on the sub-pixel grid of
    pitch ``pitch / k`` with the margin M of ``stencil`` on every side; ``shape`` is
    (ny, nx) pixels. The separable stencil of :func:`box_stencil` is applied along
    x and then along y.
    """
    ny, nx = shape
    h = pitch / k
    along_x = _integrate_axis(np.asarray(samples, np.float64), 1, nx, k, stencil)
    return _integrate_axis(along_x, 0, ny, k, stencil) * (h * h)


@dataclass(frozen=True)
class Tile:
    """A block of pixels [i0, i1) × [j0, j1) and the screen window of its sub-samples.

    The window holds (j1 − j0)·k + 2·margin rows and (i1 − i0)·k + 2·margin columns
    of samples at pitch ``pitch / k``.
    """

    i0: int
    i1: int
    j0: int
    j1: int
    screen: Screen


def tiles(
    camera: Camera,
    distance: float,
    k: int,
    margin: int = STENCIL_MARGIN,
    *,
    extra: int = 0,
    lens_focal_length: float | None = None,
) -> list[Tile]:
    """Split the sensor into tiles whose sample windows fit the engine's screen.

    Every tile window has the same sample pitch p/k in x and y, and its samples lie
    on one grid common to all tiles, so that the tiles join without a seam. A tile
    holds at most :data:`TILE_SAMPLES` samples a side, and leaves room for ``extra``
    more samples on each side (the blur margin of an extended source) within
    :data:`MAX_SCREEN_SAMPLES`.

    Raises
    ------
    ValueError
        When not even one pixel with its margins fits.
    """
    limit = min(TILE_SAMPLES, MAX_SCREEN_SAMPLES - 2 * extra)
    per = (limit - 2 * margin) // k
    if per < 1:
        raise ValueError("a pixel with its margins does not fit a screen window")
    p = camera.pixel_pitch
    h = p / k
    x0, _, y0, _ = sensor_box(camera)
    out = []
    for j0 in range(0, camera.pixels_y, per):
        j1 = min(camera.pixels_y, j0 + per)
        for i0 in range(0, camera.pixels_x, per):
            i1 = min(camera.pixels_x, i0 + per)
            nsx = (i1 - i0) * k + 2 * margin
            nsy = (j1 - j0) * k + 2 * margin
            screen = Screen(
                distance=distance,
                width=nsx * h,
                height=nsy * h,
                x=x0 + 0.5 * (i0 + i1) * p,
                y=y0 + 0.5 * (j0 + j1) * p,
                samples=nsx,
                lens_focal_length=lens_focal_length,
            )
            if screen.shape_px() != (nsy, nsx):  # the aspect rule must give every row
                raise ValueError("a tile window does not keep square samples")
            out.append(Tile(i0, i1, j0, j1, screen))
    return out


def digitise(photons: np.ndarray, camera: Camera) -> dict[str, np.ndarray]:
    """Photons per pixel over the exposure → photoelectrons → digital numbers.

    Parameters
    ----------
    photons
        Mean number of photons on each pixel's active area during the exposure.

    Returns
    -------
    dict
        ``counts`` (uint16 up to 16 bits, else uint32), ``electrons`` (the mean
        photoelectrons before noise and the full well, float64) and ``saturated``
        (bool: the pixel reached the full well, or full scale).

    References
    ----------
    EMVA 1288 release 4.0 (the linear camera model); Janesick (2007).
    """
    mean = camera.quantum_efficiency * np.asarray(photons, dtype=np.float64)
    rng = np.random.default_rng(int(camera.seed))
    e = rng.poisson(mean).astype(np.float64) if camera.shot_noise else mean.copy()
    fw = float(camera.full_well)
    saturated = e >= fw
    np.minimum(e, fw, out=e)
    if camera.read_noise > 0:
        e += rng.normal(0.0, float(camera.read_noise), size=e.shape)
    top = full_scale(camera)
    dn = np.clip(np.rint(e * (top / fw)), 0, top)
    saturated |= dn >= top
    dtype = np.uint16 if camera.bit_depth <= 16 else np.uint32
    return {"counts": dn.astype(dtype), "electrons": mean, "saturated": saturated}


def histogram(counts: np.ndarray, bit_depth: int, bins: int = 256) -> tuple[np.ndarray, np.ndarray]:
    """Histogram of a frame over the whole digital range: (bin edges in DN, pixel counts).

    At most one bin per digital number; the last bin holds full scale.
    """
    top = (1 << int(bit_depth)) - 1
    n = max(1, min(int(bins), top + 1))
    edges = np.linspace(-0.5, top + 0.5, n + 1)
    hist, _ = np.histogram(np.asarray(counts).ravel(), bins=edges)
    return edges, hist


def frame_summary(extras: dict, camera: Camera) -> dict[str, float | int]:
    """Headline numbers of a simulated frame, JSON-ready.

    Keys: ``peak_dn``, ``mean_dn``, ``full_scale``, ``saturated_pixels``,
    ``saturated_fraction``, ``peak_electrons`` (mean, noise free), ``full_well``.
    """
    counts = np.asarray(extras["counts"])
    sat = np.asarray(extras["saturated"])
    return {
        "peak_dn": int(counts.max()),
        "mean_dn": float(counts.mean()),
        "full_scale": full_scale(camera),
        "saturated_pixels": int(sat.sum()),
        "saturated_fraction": float(sat.mean()),
        "peak_electrons": float(np.max(extras["electrons"])),
        "full_well": float(camera.full_well),
    }


def _verdict_low(value: float, limits: tuple[float, float]) -> str:
    if not math.isfinite(value):
        return "ok" if value > 0 else "invalid"
    if value >= limits[0]:
        return "ok"
    return "marginal" if value >= limits[1] else "invalid"


def sampling_item(camera: Camera, finest_period: float) -> ValidityItem:
    """The Nyquist check: the finest fringe period on the sensor over two pixels."""
    ratio = finest_period / (2.0 * camera.pixel_pitch)
    v = _verdict_low(ratio, SAMPLING_LIMITS)
    if not math.isfinite(finest_period):
        return ValidityItem(
            "camera_sampling",
            "Finest fringe over two camera pixels",
            ratio,
            1.0,
            "",
            "ok",
            "No light passes the aperture but the uniform beam: there are no fringes to resolve.",
        )
    tail = (
        "; the pixels resolve it."
        if v == "ok"
        else "; it is finer than two pixels, so the camera cannot resolve it (aliasing or "
        "washed-out fringes)."
    )
    return ValidityItem(
        "camera_sampling",
        "Finest fringe over two camera pixels",
        ratio,
        1.0,
        "",
        v,
        f"The finest fringe period on the sensor is {length_text(finest_period)} against "
        f"a pixel pitch of {length_text(camera.pixel_pitch)}" + tail,
    )


def validity_items(
    setup: Setup,
    finest_period: float,
    power_on_sensor: float,
    reference_power: float | None,
    electrons: np.ndarray,
    saturated: np.ndarray,
) -> list[ValidityItem]:
    """The camera's lines of the validity report.

    ``camera_sampling`` (finest fringe over two pixels), ``camera_coverage`` (share of
    the light through the aperture that lands on the sensor) and ``camera_exposure``
    (brightest pixel over the full well, with the saturated pixels).
    """
    cam = setup.camera
    items = [sampling_item(cam, finest_period)]
    if reference_power is not None and reference_power > 0:
        frac = power_on_sensor / reference_power
        v = _verdict_low(frac, COVERAGE_LIMITS)
        s = f"The sensor receives {100 * min(frac, 1.0):.3g} % of the light that passes the "
        s += "aperture" + (
            "; the pattern fits the sensor."
            if v == "ok"
            else "; part of the pattern falls off the sensor (move or enlarge it, or shorten "
            "the distance)."
        )
    else:
        frac, v = math.nan, "marginal"
        s = (
            "The light is unbounded here (a clear background or an unbounded aperture), so "
            "no sensor holds all of it."
        )
    items.append(ValidityItem("camera_coverage", "Light on the sensor", frac, 0.9, "", v, s))
    peak = float(np.max(electrons)) if electrons.size else 0.0
    ratio = peak / float(cam.full_well)
    n_sat = int(np.count_nonzero(saturated))
    if n_sat:
        v = "invalid"
        s = (
            f"{n_sat} pixels ({100 * n_sat / saturated.size:.3g} %) saturate: the brightest "
            f"collects {ratio:.3g}× the full well; shorten the exposure or attenuate."
        )
    elif peak < 10.0 * max(1.0, float(cam.read_noise)):
        v = "marginal"
        s = (
            f"The brightest pixel collects {peak:.3g} photoelectrons, near the noise floor; "
            "lengthen the exposure."
        )
    else:
        v = "ok"
        s = f"The brightest pixel fills {100 * ratio:.3g} % of the full well; nothing saturates."
    items.append(
        ValidityItem("camera_exposure", "Brightest pixel over the full well", ratio, 1.0, "", v, s)
    )
    return items
