"""The incident field on the aperture plane, and its free propagation in closed form.

Conventions: time dependence exp(−iωt), so a wave travelling towards +z carries
exp(+ikz); the field U is scaled so that |U|² is the irradiance in W/m² — that of
the local wave, on a plane normal to it, not projected on the aperture or screen
plane (a plane wave of irradiance I0 at angle θ gives |U|² = I0, not I0·cos θ).

* ``tilt_x`` and ``tilt_y`` are angles. A plane or Gaussian wave has the direction
  cosines α = sin(tilt_x), β = sin(tilt_y), γ = √(1 − α² − β²) and carries
  exp(ik(αx + βy)) on the aperture plane: a positive tilt sends the light towards
  +x (+y). The exact methods (angular spectrum, Rayleigh–Sommerfeld) put the
  undiffracted direction at x = z·α/γ on the screen (z·tan θ with one tilt); the
  paraxial ones (Fraunhofer, Fresnel, the Gaussian beam's closed form) at
  x = z·α (z·sin θ).
* A point source radiates its power isotropically: |U|² = P/(4πρ²) at distance ρ
  from it. It sits at (−d·tan(tilt_x), −d·tan(tilt_y)) a distance d before the
  aperture plane, so that its ray to the origin has the two tilts as projected
  angles.

The closed-form free propagation (:func:`free_field`) is what a *clear*
aperture background contributes on the screen: by Babinet's principle the
screen field is the unobstructed incident field minus the field diffracted by
the complement of the aperture, which has compact support.

References
----------
.. [1] J. W. Goodman, *Introduction to Fourier Optics*, 3rd ed. (2005), §4.2
   (Fresnel diffraction of a tilted plane wave) and §4.5.
.. [2] A. E. Siegman, *Lasers* (1986), ch. 17 (the complex beam parameter q,
   Gaussian beam propagation and its ABCD transformation through a lens).
.. [3] M. Born and E. Wolf, *Principles of Optics*, 7th ed. (1999), §8.3.3
   (Babinet's principle).
"""

from __future__ import annotations

import math

import numpy as np

from .errors import SetupError
from .model import Source

__all__ = [
    "direction_cosines",
    "free_field",
    "incident_field",
    "local_frequency",
    "source_extent",
]


def direction_cosines(source: Source) -> tuple[float, float, float]:
    """Direction cosines (α, β, γ) of the incident wave's axis from its tilts."""
    a = math.sin(source.tilt_x)
    b = math.sin(source.tilt_y)
    g2 = 1.0 - a * a - b * b
    if g2 <= 0:
        raise SetupError("source.tilt_x", "the two tilts together exceed 90°; reduce them")
    return a, b, math.sqrt(g2)


def _point_position(source: Source) -> tuple[float, float]:
    """Lateral position of the point source so that its ray to the origin has the tilts."""
    d = source.distance
    return -d * math.tan(source.tilt_x), -d * math.tan(source.tilt_y)


def _gaussian_q(source: Source) -> tuple[complex, complex]:
    """Complex beam parameter at the waist and at the aperture plane.

    With ``q`` the field carries exp(i k r² / (2 q)) (Siegman ch. 17); at the
    waist q₀ = −i z_R, and free propagation by d adds d.
    """
    lam = source.wavelength
    z_r = math.pi * source.waist**2 / lam
    q0 = complex(0.0, -z_r)
    return q0, q0 + source.waist_offset


def incident_field(source: Source, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Incident field on the aperture plane at pixel centres, complex128 (ny, nx).

    Parameters
    ----------
    source
        The source settings.
    x, y
        Pixel centres, m.

    Returns
    -------
    numpy.ndarray
        The field in √(W/m²): a plane wave of irradiance ``source.irradiance``;
        a Gaussian beam of total power ``source.power`` with its curvature and
        Gouy phase at ``waist_offset`` behind the waist; or the spherical wave
        of an isotropic point source of power ``source.power``.
    """
    k = 2.0 * math.pi / source.wavelength
    xx = np.asarray(x, dtype=np.float64)[None, :]
    yy = np.asarray(y, dtype=np.float64)[:, None]
    alpha, beta, _ = direction_cosines(source)
    if source.kind == "plane":
        ramp_x = np.exp(1j * k * alpha * xx)
        ramp_y = np.exp(1j * k * beta * yy)
        return math.sqrt(source.irradiance) * (ramp_y * ramp_x)
    if source.kind == "gaussian":
        q0, q = _gaussian_q(source)
        amp = math.sqrt(2.0 * source.power / math.pi) / source.waist * (q0 / q)
        amp *= np.exp(1j * k * source.waist_offset)
        gx = np.exp(1j * k * (xx**2 / (2.0 * q) + alpha * xx))
        gy = np.exp(1j * k * (yy**2 / (2.0 * q) + beta * yy))
        return amp * (gy * gx)
    # Point source: exact spherical wave.
    xs, ys = _point_position(source)
    r = np.sqrt((xx - xs) ** 2 + (yy - ys) ** 2 + source.distance**2)
    return math.sqrt(source.power / (4.0 * math.pi)) * np.exp(1j * k * r) / r


def free_field(
    source: Source,
    x: np.ndarray,
    y: np.ndarray,
    z: float,
    *,
    lens_focal_length: float | None = None,
    paraxial: bool = True,
) -> np.ndarray:
    """The unobstructed incident field at distance ``z`` behind the aperture plane.

    Parameters
    ----------
    source
        The source settings.
    x, y
        Screen pixel centres, m.
    z
        Distance behind the aperture plane (behind the lens when one is set), m.
    lens_focal_length
        A thin lens of infinite extent in the aperture plane, or None.
    paraxial
        Use the Fresnel (paraxial) phase for plane and Gaussian waves, matching
        the Fresnel propagators; False gives the exact plane-wave phase.

    Raises
    ------
    SetupError
        A plane wave or point source through an unbounded lens focuses unlimited
        power; such a setup needs an opaque background with a finite opening.
    """
    k = 2.0 * math.pi / source.wavelength
    xx = np.asarray(x, dtype=np.float64)[None, :]
    yy = np.asarray(y, dtype=np.float64)[:, None]
    alpha, beta, gamma = direction_cosines(source)
    if lens_focal_length is not None and source.kind != "gaussian":
        raise SetupError(
            "aperture.background",
            "a clear background with a lens lets an unbounded plane or spherical wave "
            "through the lens; use an opaque background with an opening the size of the "
            "lens, or a Gaussian source",
        )
    if source.kind == "plane":
        phase_z = k * z * (1.0 - 0.5 * (alpha**2 + beta**2)) if paraxial else k * z * gamma
        return (
            math.sqrt(source.irradiance)
            * np.exp(1j * phase_z)
            * (np.exp(1j * k * beta * yy) * np.exp(1j * k * alpha * xx))
        )
    if source.kind == "gaussian":
        q0, q = _gaussian_q(source)
        amp = math.sqrt(2.0 * source.power / math.pi) / source.waist * (q0 / q)
        amp *= np.exp(1j * k * source.waist_offset)
        if lens_focal_length is not None:
            q = 1.0 / (1.0 / q - 1.0 / lens_focal_length)
        amp = amp * (q / (q + z)) * np.exp(1j * k * z)
        q = q + z
        # A tilt is a carrier of frequency α/λ: the beam walks off by z·α and picks
        # up the phase −k z α²/2 (Goodman §4.2, Fresnel shift theorem).
        amp = amp * np.exp(-0.5j * k * z * (alpha**2 + beta**2))
        sx, sy = z * alpha, z * beta
        gx = np.exp(1j * k * ((xx - sx) ** 2 / (2.0 * q) + alpha * xx))
        gy = np.exp(1j * k * ((yy - sy) ** 2 / (2.0 * q) + beta * yy))
        return amp * (gy * gx)
    xs, ys = _point_position(source)
    d = source.distance + z
    r = np.sqrt((xx - xs) ** 2 + (yy - ys) ** 2 + d**2)
    return math.sqrt(source.power / (4.0 * math.pi)) * np.exp(1j * k * r) / r


def source_extent(source: Source) -> tuple[float, float, float, float] | None:
    """Box on the aperture plane outside which the incident power is negligible.

    For a Gaussian beam this is ±4 w about the beam centre, where the irradiance
    has fallen to exp(−32) ≈ 1e-14 of its peak; plane waves and point sources
    are unbounded (None).
    """
    if source.kind != "gaussian":
        return None
    _, q = _gaussian_q(source)
    k = 2.0 * math.pi / source.wavelength
    w = math.sqrt(2.0 / (k * (1.0 / q).imag))
    return (-4.0 * w, 4.0 * w, -4.0 * w, 4.0 * w)


def local_frequency(source: Source, rx: float, ry: float) -> tuple[float, float]:
    """Largest local spatial frequency of the incident phase inside |x| ≤ rx, |y| ≤ ry.

    Used by the planner to sample the incident curvature and tilt; cycles/m.
    """
    lam = source.wavelength
    alpha, beta, _ = direction_cosines(source)
    fx, fy = abs(alpha) / lam, abs(beta) / lam
    if source.kind == "gaussian":
        _, q = _gaussian_q(source)
        curv = abs((1.0 / q).real)  # 1/R
        fx += rx * curv / lam
        fy += ry * curv / lam
    elif source.kind == "point":
        xs, ys = _point_position(source)
        d = source.distance
        # sin of the largest ray angle from the source across the box
        ex = max(abs(rx - xs), abs(-rx - xs))
        ey = max(abs(ry - ys), abs(-ry - ys))
        fx = ex / math.hypot(ex, d) / lam
        fy = ey / math.hypot(ey, d) / lam
    return fx, fy
