"""Closed forms of scalar diffraction in absolute units.

Inputs are SI (m, W, W/m²); irradiances come out in W/m² and complex fields in
√(W/m²), so that ``abs(field)**2`` is the irradiance. ``irradiance`` arguments are
the uniform irradiance ``I0`` of the plane wave incident on the aperture, and
all apertures are centred on the optical axis. Every function is pure and
broadcasts over numpy arrays.

Conventions follow Goodman: time dependence ``exp(-iωt)``, so a wave travelling
towards +z carries ``exp(+ikz)`` with ``k = 2π/λ``. Fraunhofer and Fresnel forms
are the paraxial ones of Goodman's chapter 4; :func:`circle_on_axis` with
``exact=True`` is the exact Rayleigh–Sommerfeld value.

Section numbers in the References sections are given as recalled from memory
of the cited editions.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Literal

import numpy as np
import numpy.typing as npt
from scipy import optimize, special

__all__ = [
    "AIRY_FIRST_ZERO",
    "GaussianBeam",
    "airy_first_zero",
    "annulus_fraunhofer",
    "circle_encircled_energy",
    "circle_fraunhofer",
    "circle_on_axis",
    "fraunhofer_distance",
    "fresnel_number",
    "gaussian_beam",
    "gaussian_field",
    "grating_fraunhofer",
    "knife_edge",
    "knife_edge_field",
    "knife_edge_first_maximum",
    "lens_airy_radius",
    "lens_focus_peak",
    "open_zones",
    "rect_fraunhofer",
    "rect_fresnel",
    "rect_fresnel_field",
    "slit_zeros",
    "talbot_distance",
]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]

#: First zero of J1 divided by π: the Airy radius is this times λz/D (≈ 1.21967).
AIRY_FIRST_ZERO: float = float(special.jn_zeros(1, 1)[0] / np.pi)


# --------------------------------------------------------------------------- checks


def _positive(name: str, value: npt.ArrayLike) -> FloatArray:
    arr = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(arr)) or np.any(arr <= 0):
        raise ValueError(f"{name} must be positive and finite, got {value!r}")
    return arr


def _non_negative(name: str, value: npt.ArrayLike) -> FloatArray:
    arr = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise ValueError(f"{name} must be non-negative and finite, got {value!r}")
    return arr


def _coords(*values: npt.ArrayLike) -> list[FloatArray]:
    out = [np.asarray(v, dtype=float) for v in values]
    for v in out:
        if not np.all(np.isfinite(v)):
            raise ValueError("screen coordinates must be finite")
    return out


def _jinc(v: FloatArray) -> FloatArray:
    """2 J1(v) / v, equal to 1 at v = 0."""
    safe = np.where(v == 0, 1.0, v)
    return np.where(v == 0, 1.0, 2.0 * special.j1(safe) / safe)


# ------------------------------------------------------------------ Fraunhofer forms


def rect_fraunhofer(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    width: float,
    height: float,
    wavelength: float,
    z: float,
    irradiance: float,
) -> FloatArray:
    """Far-field irradiance of a uniformly lit rectangle (a slit when one side is long).

    ``I = I0 (A/(λz))² sinc²(w x/(λz)) sinc²(h y/(λz))`` with ``A = w h`` and
    ``sinc(u) = sin(πu)/(πu)``.

    Parameters
    ----------
    x, y : array_like
        Screen coordinates, m (broadcast against each other).
    width, height : float
        Full sides of the rectangle along x and y, m.
    wavelength : float
        Vacuum wavelength, m.
    z : float
        Aperture-to-screen distance, m.
    irradiance : float
        Incident irradiance I0, W/m².

    Returns
    -------
    ndarray
        Irradiance, W/m².

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.3 and §4.4.1.
    Born & Wolf, Principles of Optics, 7th ed., §8.5.1.
    Hecht, Optics, 5th ed., §10.2.1 and §10.2.4.
    """
    x, y = _coords(x, y)
    w, h = _positive("width", width), _positive("height", height)
    lz = _positive("wavelength", wavelength) * _positive("z", z)
    i0 = _non_negative("irradiance", irradiance)
    peak = i0 * (w * h / lz) ** 2
    return peak * np.sinc(w * x / lz) ** 2 * np.sinc(h * y / lz) ** 2


def slit_zeros(
    width: float, wavelength: float, z: float, orders: int | npt.ArrayLike
) -> FloatArray:
    """Positions of the zeros of a slit's far field, ``x_m = m λ z / w``.

    Parameters
    ----------
    width : float
        Slit width, m.
    wavelength, z : float
        Wavelength and distance, m.
    orders : int or array_like of int
        An int ``n`` gives the orders 1 … n; a sequence gives those orders
        (nonzero integers, negative for the other side).

    Returns
    -------
    ndarray
        Zero positions on the screen, m.

    References
    ----------
    Hecht, Optics, 5th ed., §10.2.1. Born & Wolf, Principles of Optics, 7th ed., §8.5.1.
    """
    if np.ndim(orders) == 0:
        n = int(orders)
        if n < 1 or n != orders:
            raise ValueError(f"orders must be a positive integer or a list, got {orders!r}")
        m = np.arange(1, n + 1, dtype=float)
    else:
        m = np.asarray(orders, dtype=float)
        if np.any(m == 0) or np.any(m != np.round(m)):
            raise ValueError(f"orders must be nonzero integers, got {orders!r}")
    lz = _positive("wavelength", wavelength) * _positive("z", z)
    return m * lz / _positive("width", width)


def circle_fraunhofer(
    r: npt.ArrayLike, diameter: float, wavelength: float, z: float, irradiance: float
) -> FloatArray:
    """Airy pattern of a uniformly lit circular aperture, in absolute units.

    ``I = I0 (A/(λz))² [2 J1(v)/v]²`` with ``A = π D²/4`` and ``v = π D r/(λz)``.

    Parameters
    ----------
    r : array_like
        Radial distance on the screen from the axis, m.
    diameter : float
        Aperture diameter D, m.
    wavelength, z : float
        Wavelength and distance, m.
    irradiance : float
        Incident irradiance I0, W/m².

    Returns
    -------
    ndarray
        Irradiance, W/m².

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.4.2.
    Born & Wolf, Principles of Optics, 7th ed., §8.5.2.
    scipy.special.j1.
    """
    (r,) = _coords(r)
    d = _positive("diameter", diameter)
    lz = _positive("wavelength", wavelength) * _positive("z", z)
    i0 = _non_negative("irradiance", irradiance)
    area = np.pi * d**2 / 4
    return i0 * (area / lz) ** 2 * _jinc(np.pi * d * np.abs(r) / lz) ** 2


def airy_first_zero(diameter: float, wavelength: float, z: float) -> FloatArray:
    """Radius of the first dark ring of the Airy pattern, ``j_{1,1}/π · λz/D ≈ 1.21967 λz/D``.

    References
    ----------
    Born & Wolf, Principles of Optics, 7th ed., §8.5.2.
    Hecht, Optics, 5th ed., §10.2.5. scipy.special.jn_zeros.
    """
    lz = _positive("wavelength", wavelength) * _positive("z", z)
    return AIRY_FIRST_ZERO * lz / _positive("diameter", diameter)


def circle_encircled_energy(
    r: npt.ArrayLike, diameter: float, wavelength: float, z: float
) -> FloatArray:
    """Fraction of the Airy pattern's power within radius r: ``1 − J0²(v) − J1²(v)``.

    ``v = π D r/(λz)``. At the first dark ring the fraction is 0.838.

    References
    ----------
    Rayleigh's formula; Born & Wolf, Principles of Optics, 7th ed., §8.5.2.
    scipy.special.j0, scipy.special.j1.
    """
    (r,) = _coords(r)
    lz = _positive("wavelength", wavelength) * _positive("z", z)
    v = np.pi * _positive("diameter", diameter) * np.abs(r) / lz
    return 1.0 - special.j0(v) ** 2 - special.j1(v) ** 2


def annulus_fraunhofer(
    r: npt.ArrayLike,
    diameter: float,
    inner_diameter: float,
    wavelength: float,
    z: float,
    irradiance: float,
) -> FloatArray:
    """Far-field irradiance of a uniformly lit ring between two concentric circles.

    The field is the outer disk's minus the inner disk's:
    ``I = I0/(λz)² [A_o 2J1(v_o)/v_o − A_i 2J1(v_i)/v_i]²``, ``v = π D r/(λz)``.

    Parameters
    ----------
    r : array_like
        Radial distance on the screen, m.
    diameter, inner_diameter : float
        Outer and inner diameters, m; ``0 ≤ inner_diameter < diameter``.
    wavelength, z : float
        Wavelength and distance, m.
    irradiance : float
        Incident irradiance I0, W/m².

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.4.2 (the disk field; the
    ring is the difference of two disks by linearity of the diffraction integral).
    Born & Wolf, Principles of Optics, 7th ed., §8.5.2.
    """
    (r,) = _coords(r)
    d_o = _positive("diameter", diameter)
    d_i = _non_negative("inner_diameter", inner_diameter)
    if np.any(d_i >= d_o):
        raise ValueError(
            f"inner_diameter {inner_diameter!r} m must be smaller than diameter {diameter!r} m"
        )
    lz = _positive("wavelength", wavelength) * _positive("z", z)
    i0 = _non_negative("irradiance", irradiance)
    rr = np.abs(r)
    amp = (np.pi * d_o**2 / 4) * _jinc(np.pi * d_o * rr / lz) - (np.pi * d_i**2 / 4) * _jinc(
        np.pi * d_i * rr / lz
    )
    return i0 * (amp / lz) ** 2


def _array_factor(beta: FloatArray, count: int) -> FloatArray:
    """sin(Nβ)/sin(β) up to sign, finite at β = mπ (where it is ±N)."""
    # Reduce β to ε in [-π/2, π/2]: |sin Nβ / sin β| = |sin Nε / sin ε| there,
    # and sinc handles ε = 0 exactly.
    eps = beta - np.pi * np.round(beta / np.pi)
    return count * np.sinc(count * eps / np.pi) / np.sinc(eps / np.pi)


def grating_fraunhofer(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    count: int,
    period: float,
    width: float,
    height: float,
    wavelength: float,
    z: float,
    irradiance: float,
) -> FloatArray:
    """Far field of ``count`` identical rectangular openings side by side along x.

    Single-opening envelope times the N-slit factor:
    ``I = I0 (w h/(λz))² sinc²(w x/(λz)) sinc²(h y/(λz)) (sin Nβ / sin β)²``,
    ``β = π d x/(λz)``; at the principal maxima ``β = mπ`` the factor is N².

    Parameters
    ----------
    x, y : array_like
        Screen coordinates, m.
    count : int
        Number of openings N ≥ 1.
    period : float
        Centre-to-centre distance d, m.
    width, height : float
        Size of each opening, m; ``width ≤ period``.
    wavelength, z : float
        Wavelength and distance, m.
    irradiance : float
        Incident irradiance I0, W/m².

    References
    ----------
    Born & Wolf, Principles of Optics, 7th ed., §8.6.1.
    Hecht, Optics, 5th ed., §10.2.3.
    """
    x, y = _coords(x, y)
    n = int(count)
    if n != count or n < 1:
        raise ValueError(f"count must be a positive integer, got {count!r}")
    d = _positive("period", period)
    w = _positive("width", width)
    if np.any(w > d):
        raise ValueError(f"width {width!r} m must not exceed period {period!r} m")
    envelope = rect_fraunhofer(x, y, width, height, wavelength, z, irradiance)
    lz = np.asarray(wavelength, dtype=float) * np.asarray(z, dtype=float)
    return envelope * _array_factor(np.pi * d * x / lz, n) ** 2


# --------------------------------------------------------------------- Fresnel forms


def _strip_integral(x: FloatArray, width: FloatArray, lz: FloatArray) -> ComplexArray:
    """F(α2) − F(α1), F = C + iS, for the strip |ξ| ≤ w/2 seen from x."""
    scale = np.sqrt(2.0 / lz)
    s1, c1 = special.fresnel(-scale * (width / 2 + x))  # scipy returns (S, C)
    s2, c2 = special.fresnel(scale * (width / 2 - x))
    return (c2 - c1) + 1j * (s2 - s1)


def rect_fresnel_field(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    width: float,
    height: float,
    wavelength: float,
    z: float,
    irradiance: float,
) -> ComplexArray:
    """Complex Fresnel-zone field of a uniformly lit rectangle, √(W/m²).

    ``U = √I0 e^{ikz}/(2i) [ΔC(α) + iΔS(α)] [ΔC(β) + iΔS(β)]`` with
    ``α1,2 = √(2/(λz)) (∓w/2 − x)``, ``β1,2 = √(2/(λz)) (∓h/2 − y)`` and the
    Fresnel integrals ``C(u) + iS(u) = ∫₀ᵘ exp(iπt²/2) dt``. The normalisation makes
    ``|U|²`` the irradiance in W/m² and ``U → √I0 e^{ikz}`` deep inside the
    geometric image.

    Parameters
    ----------
    x, y : array_like
        Screen coordinates, m.
    width, height : float
        Sides of the rectangle, m.
    wavelength, z : float
        Wavelength and distance, m.
    irradiance : float
        Incident irradiance I0, W/m².

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.2 and §4.5.1.
    Born & Wolf, Principles of Optics, 7th ed., §8.7.2. scipy.special.fresnel
    (argument convention S(u) = ∫₀ᵘ sin(πt²/2) dt, returned as (S, C)).
    """
    x, y = _coords(x, y)
    w, h = _positive("width", width), _positive("height", height)
    lam, dist = _positive("wavelength", wavelength), _positive("z", z)
    i0 = _non_negative("irradiance", irradiance)
    k = 2 * np.pi / lam
    lz = lam * dist
    prefactor = np.sqrt(i0) * np.exp(1j * k * dist) / 2j
    return prefactor * _strip_integral(x, w, lz) * _strip_integral(y, h, lz)


def rect_fresnel(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    width: float,
    height: float,
    wavelength: float,
    z: float,
    irradiance: float,
) -> FloatArray:
    """Fresnel-zone irradiance of a uniformly lit rectangle, W/m².

    ``|rect_fresnel_field|²``; see :func:`rect_fresnel_field` for the form.

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.5.1. scipy.special.fresnel.
    """
    return np.abs(rect_fresnel_field(x, y, width, height, wavelength, z, irradiance)) ** 2


def knife_edge_field(
    x: npt.ArrayLike, wavelength: float, z: float, irradiance: float
) -> ComplexArray:
    """Complex field behind a straight edge whose open half-plane is x ≥ 0, √(W/m²).

    The aperture transmits x′ ≥ 0 (the snapshot ``edge`` element on an opaque
    background) and is unbounded in y. With ``u = √(2/(λz)) x``,
    ``U = √I0 e^{ikz} (1+i)/(2i) [(C(u) + ½) + i(S(u) + ½)]``.

    References
    ----------
    Born & Wolf, Principles of Optics, 7th ed., §8.7.3.
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.2. scipy.special.fresnel.
    """
    (x,) = _coords(x)
    lam, dist = _positive("wavelength", wavelength), _positive("z", z)
    i0 = _non_negative("irradiance", irradiance)
    s, c = special.fresnel(np.sqrt(2.0 / (lam * dist)) * x)
    prefactor = np.sqrt(i0) * np.exp(1j * 2 * np.pi / lam * dist) * (1 + 1j) / 2j
    return prefactor * ((c + 0.5) + 1j * (s + 0.5))


def knife_edge(x: npt.ArrayLike, wavelength: float, z: float, irradiance: float) -> FloatArray:
    """Irradiance behind a straight edge whose open half-plane is x ≥ 0, W/m².

    ``I = I0/2 [(C(u) + ½)² + (S(u) + ½)²]`` with ``u = √(2/(λz)) x``: 0.25 I0 at the
    geometric shadow boundary x = 0, fringes on the lit side x > 0 with a first
    maximum of about 1.37 I0, and a monotonic fall into the shadow x < 0. For the
    opposite case, an opaque half-plane x′ ≥ 0 on a clear background, use ``-x``.

    Parameters
    ----------
    x : array_like
        Screen coordinate across the edge, m; positive on the lit side.
    wavelength, z : float
        Wavelength and distance, m.
    irradiance : float
        Incident irradiance I0, W/m².

    References
    ----------
    Born & Wolf, Principles of Optics, 7th ed., §8.7.3.
    Hecht, Optics, 5th ed., §10.3.9. scipy.special.fresnel.
    """
    (x,) = _coords(x)
    lam, dist = _positive("wavelength", wavelength), _positive("z", z)
    i0 = _non_negative("irradiance", irradiance)
    s, c = special.fresnel(np.sqrt(2.0 / (lam * dist)) * x)
    return 0.5 * i0 * ((c + 0.5) ** 2 + (s + 0.5) ** 2)


@functools.lru_cache(maxsize=1)
def _knife_edge_peak_u() -> float:
    """Fresnel variable u of the first maximum behind a straight edge (≈ 1.217)."""

    def slope(u: float) -> float:
        # d/du of (C + ½)² + (S + ½)², halved: the extrema of the knife-edge pattern.
        s, c = special.fresnel(u)
        return float((c + 0.5) * np.cos(np.pi * u * u / 2) + (s + 0.5) * np.sin(np.pi * u * u / 2))

    # slope(0) = 0.5 > 0 and the first extremum beyond it is the maximum; the next
    # extremum (a minimum) lies near u = 1.87, outside the bracket.
    return float(optimize.brentq(slope, 0.0, 1.6, xtol=1e-14))


def knife_edge_first_maximum(
    wavelength: float, z: float, irradiance: float = 1.0
) -> tuple[float, float]:
    """Position and irradiance of the brightest fringe behind a straight edge.

    Found numerically as the first zero of the derivative of the Fresnel-integral
    form of :func:`knife_edge` (``scipy.optimize.brentq``), at ``u ≈ 1.217``.

    Parameters
    ----------
    wavelength, z : float
        Wavelength and distance, m.
    irradiance : float, optional
        Incident irradiance I0, W/m²; with the default 1 the value is relative (≈ 1.37).

    Returns
    -------
    (x, value) : tuple of float
        Position on the lit side, m, and the irradiance there, W/m².

    References
    ----------
    Born & Wolf, Principles of Optics, 7th ed., §8.7.3.
    scipy.special.fresnel, scipy.optimize.brentq.
    """
    lam, dist = float(_positive("wavelength", wavelength)), float(_positive("z", z))
    u = _knife_edge_peak_u()
    x = u * np.sqrt(lam * dist / 2.0)
    return float(x), float(knife_edge(x, lam, dist, irradiance))


def circle_on_axis(
    z: npt.ArrayLike,
    diameter: float,
    wavelength: float,
    irradiance: float,
    exact: bool = True,
) -> FloatArray:
    """On-axis irradiance behind a uniformly lit circular aperture, W/m².

    Exact (Rayleigh–Sommerfeld, first kind):
    ``I = I0 |1 − (z/R) e^{ik(R − z)}|²`` with ``R = √(z² + a²)``, ``a = D/2``.
    Paraxial (``exact=False``): ``I = 4 I0 sin²(π a²/(2λz))``, which is 4 I0 for an odd
    and 0 for an even number of open Fresnel zones.

    Parameters
    ----------
    z : array_like
        Distance from the aperture, m (> 0).
    diameter : float
        Aperture diameter, m.
    wavelength : float
        Wavelength, m.
    irradiance : float
        Incident irradiance I0, W/m².
    exact : bool, optional
        Rayleigh–Sommerfeld value (default) or its paraxial limit.

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §3.5 (Rayleigh–Sommerfeld
    integral; the axial case is one of the chapter's problems).
    J. C. Heurtley, "Scalar Rayleigh–Sommerfeld and Kirchhoff diffraction integrals:
    a comparison of exact evaluations for axial points", JOSA 63, 1003 (1973).
    Hecht, Optics, 5th ed., §10.3.3 (Fresnel zones).
    """
    dist = _positive("z", z)
    a = _positive("diameter", diameter) / 2
    lam = _positive("wavelength", wavelength)
    i0 = _non_negative("irradiance", irradiance)
    if not exact:
        return 4 * i0 * np.sin(np.pi * a**2 / (2 * lam * dist)) ** 2
    big_r = np.hypot(dist, a)
    path = a**2 / (big_r + dist)  # R − z without cancellation
    q = dist / big_r
    # |1 − q e^{iφ}|² = (1 − q)² + 4 q sin²(φ/2), with 1 − q = (R − z)/R.
    return i0 * ((path / big_r) ** 2 + 4 * q * np.sin(np.pi * path / lam) ** 2)


def open_zones(
    z: npt.ArrayLike, diameter: float, wavelength: float, exact: bool = False
) -> FloatArray:
    """Number of Fresnel zones open in a circular aperture seen from the axis.

    Paraxial: ``a²/(λz)``, the Fresnel number. Exact (``exact=True``): ``2(R − z)/λ``
    with ``R = √(z² + a²)``, the edge-to-centre path difference in half waves.

    References
    ----------
    Hecht, Optics, 5th ed., §10.3.1 and §10.3.3.
    Born & Wolf, Principles of Optics, 7th ed., §8.2 (Fresnel zones).
    """
    dist = _positive("z", z)
    a = _positive("diameter", diameter) / 2
    lam = _positive("wavelength", wavelength)
    if not exact:
        return a**2 / (lam * dist)
    return 2 * a**2 / ((np.hypot(dist, a) + dist) * lam)


# -------------------------------------------------------------------- Gaussian beams


@dataclass(frozen=True)
class GaussianBeam:
    """Parameters of a TEM00 beam at distance z from its waist (arrays broadcast)."""

    radius: FloatArray
    """1/e² irradiance radius w(z), m."""
    curvature_radius: FloatArray
    """Wavefront radius of curvature R(z), m; +inf at the waist, negative before it."""
    gouy_phase: FloatArray
    """Gouy phase ζ(z) = arctan(z/z_R), rad."""
    rayleigh_range: FloatArray
    """z_R = π w0²/λ, m."""
    irradiance: FloatArray
    """2P/(π w²) exp(−2r²/w²), W/m²."""


def _rayleigh_range(waist: float, wavelength: float) -> FloatArray:
    return np.pi * _positive("waist", waist) ** 2 / _positive("wavelength", wavelength)


def gaussian_beam(
    r: npt.ArrayLike, z: npt.ArrayLike, waist: float, wavelength: float, power: float
) -> GaussianBeam:
    """Radius, curvature, Gouy phase and irradiance of a Gaussian beam.

    ``w(z) = w0 √(1 + (z/z_R)²)``, ``R(z) = z (1 + (z_R/z)²)``, ``ζ = arctan(z/z_R)``,
    ``I = 2P/(πw²) exp(−2r²/w²)``; z is measured from the waist, positive after it.

    Parameters
    ----------
    r : array_like
        Radial distance from the beam axis, m.
    z : array_like
        Distance from the waist, m.
    waist : float
        Waist radius w0 (1/e² irradiance), m.
    wavelength : float
        Wavelength, m.
    power : float
        Beam power P, W.

    References
    ----------
    Siegman, Lasers (1986), ch. 17 (§17.1). Goodman, Introduction to Fourier Optics,
    3rd ed., §4.2 (the Fresnel integral that carries it).
    """
    r, z = _coords(r, z)
    z_r = _rayleigh_range(waist, wavelength)
    w0 = np.asarray(waist, dtype=float)
    p = _non_negative("power", power)
    w = w0 * np.sqrt(1 + (z / z_r) ** 2)
    with np.errstate(divide="ignore"):
        curvature = np.where(z == 0, np.inf, z + z_r**2 / np.where(z == 0, 1.0, z))
    irr = 2 * p / (np.pi * w**2) * np.exp(-2 * r**2 / w**2)
    return GaussianBeam(
        radius=w,
        curvature_radius=curvature,
        gouy_phase=np.arctan(z / z_r),
        rayleigh_range=z_r,
        irradiance=irr,
    )


def gaussian_field(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    z: npt.ArrayLike,
    waist: float,
    wavelength: float,
    power: float,
) -> ComplexArray:
    """Complex TEM00 field at (x, y) and distance z from the waist, √(W/m²).

    ``U = √(2P/(π w0²)) (w0/w) exp(−r²/w²) exp(i[kz + k r²/(2R) − ζ])`` for time
    dependence ``exp(−iωt)``, so that ``|U|²`` is :attr:`GaussianBeam.irradiance`.
    Siegman writes the conjugate form (``exp(+iωt)``, ``exp(−ikz)``).

    References
    ----------
    Siegman, Lasers (1986), ch. 17. Goodman, Introduction to Fourier Optics,
    3rd ed., §4.2 (sign convention of the Fresnel integral).
    """
    x, y, z = _coords(x, y, z)
    z_r = _rayleigh_range(waist, wavelength)
    w0 = np.asarray(waist, dtype=float)
    k = 2 * np.pi / np.asarray(wavelength, dtype=float)
    p = _non_negative("power", power)
    r2 = x**2 + y**2
    w2 = w0**2 * (1 + (z / z_r) ** 2)
    curvature_phase = k * r2 * z / (2 * (z**2 + z_r**2))  # k r²/(2R), finite at z = 0
    phase = k * z + curvature_phase - np.arctan(z / z_r)
    amplitude = np.sqrt(2 * p / (np.pi * w0**2)) * np.sqrt(w0**2 / w2) * np.exp(-r2 / w2)
    return amplitude * np.exp(1j * phase)


# ------------------------------------------------------- distances and scale numbers


def talbot_distance(period: float, wavelength: float, exact: bool = False) -> FloatArray:
    """Self-imaging distance of a periodic object lit by a plane wave.

    Paraxial: ``z_T = 2d²/λ``. Exact (``exact=True``): the distance at which the
    first diffraction order, at ``sin θ = λ/d``, has slipped one full wave behind the
    zeroth, ``z_T = λ/(1 − √(1 − λ²/d²))``; it needs ``d > λ``.

    References
    ----------
    H. F. Talbot, Phil. Mag. 9, 401 (1836); Lord Rayleigh, Phil. Mag. 11, 196 (1881).
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.5.2.
    """
    d = _positive("period", period)
    lam = _positive("wavelength", wavelength)
    if not exact:
        return 2 * d**2 / lam
    s = (lam / d) ** 2
    if np.any(s >= 1):
        raise ValueError(
            f"period {period!r} m must exceed the wavelength {wavelength!r} m for a "
            "first diffraction order to propagate"
        )
    # λ/(1 − √(1 − s)) rewritten without the cancellation at small s.
    return lam * (1 + np.sqrt(1 - s)) / s


def lens_focus_peak(
    amount: float,
    diameter: float,
    wavelength: float,
    focal_length: float,
    *,
    given: Literal["irradiance", "power"] = "irradiance",
) -> FloatArray:
    """Peak irradiance at the focus of an aberration-free, uniformly lit circular lens.

    ``I_peak = I0 (A/(λf))² = P A/(λf)²`` with ``A = π D²/4``.

    Parameters
    ----------
    amount : float
        The incident irradiance I0 in W/m² (``given="irradiance"``) or the power
        P through the lens in W (``given="power"``).
    diameter : float
        Lens (pupil) diameter, m.
    wavelength : float
        Wavelength, m.
    focal_length : float
        Focal length, m (> 0).
    given : {"irradiance", "power"}
        What ``amount`` is.

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §5.2 (the back focal plane is
    the Fourier transform) and §4.4.2. Born & Wolf, Principles of Optics, 7th ed., §8.5.2.
    """
    if given not in ("irradiance", "power"):
        raise ValueError(f"given must be 'irradiance' or 'power', got {given!r}")
    value = _non_negative(given, amount)
    area = np.pi * _positive("diameter", diameter) ** 2 / 4
    lf = _positive("wavelength", wavelength) * _positive("focal_length", focal_length)
    irradiance = value if given == "irradiance" else value / area
    return irradiance * (area / lf) ** 2


def lens_airy_radius(diameter: float, wavelength: float, focal_length: float) -> FloatArray:
    """Radius of the first dark ring at the focus of a circular lens, ``1.21967 λf/D``.

    References
    ----------
    Born & Wolf, Principles of Optics, 7th ed., §8.5.2.
    Hecht, Optics, 5th ed., §10.2.5. scipy.special.jn_zeros.
    """
    return airy_first_zero(diameter, wavelength, focal_length)


def fresnel_number(half_width: float, wavelength: float, z: npt.ArrayLike) -> FloatArray:
    """Fresnel number ``N_F = a²/(λz)`` for an aperture of half-width (radius) a.

    ``N_F ≫ 1`` is the near field, ``N_F ≲ 1`` the Fresnel zone, ``N_F ≪ 1`` the far field.

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.3.
    Born & Wolf, Principles of Optics, 7th ed., §8.3.3.
    """
    a = _positive("half_width", half_width)
    return a**2 / (_positive("wavelength", wavelength) * _positive("z", z))


def fraunhofer_distance(size: float, wavelength: float) -> FloatArray:
    """Fraunhofer distance ``2D²/λ`` of an aperture of largest size D.

    Beyond it the quadratic phase that the Fraunhofer form drops stays below π/8
    across the aperture.

    References
    ----------
    Goodman, Introduction to Fourier Optics, 3rd ed., §4.3 (the antenna designer's
    formula).
    """
    return 2 * _positive("size", size) ** 2 / _positive("wavelength", wavelength)
