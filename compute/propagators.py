"""Propagation of a sampled aperture field to a screen: pure functions over arrays.

Every function takes the field ``u`` sampled at pixel centres ``x`` (nx,) and
``y`` (ny,) on the aperture plane, shape (ny, nx), in √(W/m²), and returns the
field on the screen in the same units. Integrals are midpoint sums over the
pixels (``u`` is area-weighted, so a pixel carries its mean transmittance).

Conventions: time dependence exp(−iωt); forward propagation exp(+ikz); the
forward spatial transform is A(f) = ∫ u(x) exp(−2πi f·x) dx.

References
----------
.. [G] J. W. Goodman, *Introduction to Fourier Optics*, 3rd ed. (2005):
   §3.10 (angular spectrum), §4.2 (Fresnel approximation, impulse response and
   transfer function), §4.3 (Fraunhofer approximation), §5.2 (thin lens as a
   Fourier transformer), §3.5 (Rayleigh–Sommerfeld formula).
.. [V] D. G. Voelz, *Computational Fourier Optics: A MATLAB Tutorial*, SPIE
   (2011), §5.1 (criterion Δx ≷ λz/L between transfer-function and
   impulse-response Fresnel propagation).
.. [MS] K. Matsushima and T. Shimobaba, "Band-limited angular spectrum method
   for numerical simulation of free-space propagation in far and near fields,"
   Opt. Express 17, 19662–19673 (2009).
.. [BG] A. H. Barnett, J. Magland and L. af Klinteberg, "A parallel nonuniform fast
   Fourier transform library based on an 'exponential of semicircle' kernel," SIAM
   J. Sci. Comput. 41, C479–C504 (2019) (the non-uniform FFT, library finufft).
.. [SJ] R. Soummer, L. Pueyo, A. Sivaramakrishnan and R. J. Vanderbei, "Fast
   computation of Lyot-style coronagraph propagation," Opt. Express 15,
   15935–15951 (2007) (the matrix Fourier transform).
"""

from __future__ import annotations

import math

import numpy as np

from . import fft as _fft

__all__ = [
    "angular_spectrum_kernel",
    "fraunhofer",
    "fresnel_impulse_response",
    "fresnel_transfer_kernel",
    "lens_phase",
    "matrix_dft",
    "propagate_fft",
    "rayleigh_sommerfeld",
    "rayleigh_sommerfeld_far_field",
    "spectrum_to_points",
]


def _complex_dtype(u: np.ndarray) -> np.dtype:
    return (
        np.dtype(np.complex64) if u.dtype in (np.complex64, np.float32) else np.dtype(np.complex128)
    )


def _pitch(a: np.ndarray, fallback: float | None = None) -> float:
    if a.size > 1:
        return float(a[1] - a[0])
    if fallback is None:
        raise ValueError("a single-sample axis needs an explicit pitch")
    return fallback


def _kernel(freqs: np.ndarray, coords: np.ndarray, sign: float, dtype) -> np.ndarray:
    """exp(sign·2πi f x) as a (len(freqs), len(coords)) matrix.

    The phase is formed in float64 and reduced modulo 2π before the cast, so a
    single-precision matrix is as accurate as its storage allows.
    """
    ph = np.multiply.outer(np.asarray(freqs, np.float64), np.asarray(coords, np.float64))
    ph -= np.round(ph)  # whole cycles carry no phase
    ph *= sign * 2.0 * math.pi
    out = np.empty(ph.shape, dtype=dtype)
    np.cos(ph, out=out.real)
    np.sin(ph, out=out.imag)
    return out


def matrix_dft(
    u: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    fx: np.ndarray,
    fy: np.ndarray,
    *,
    pitch: tuple[float, float] | None = None,
    sign: float = -1.0,
) -> np.ndarray:
    """Fourier sum of ``u`` at arbitrary frequencies: the matrix Fourier transform.

    Returns ``F[q, p] = Σ_j Σ_i u[j, i] exp(sign·2πi (fx[p] x[i] + fy[q] y[j])) Δx Δy``,
    shape (len(fy), len(fx)), as two matrix products (Soummer et al. 2007). The
    product order is chosen to do the fewest multiplications.

    References
    ----------
    R. Soummer et al., Opt. Express 15, 15935 (2007).
    """
    dtype = _complex_dtype(u)
    dx = _pitch(x, pitch[0] if pitch else None)
    dy = _pitch(y, pitch[1] if pitch else None)
    ex = _kernel(x, fx, sign, dtype)  # (nx, nfx)
    ey = _kernel(fy, y, sign, dtype)  # (nfy, ny)
    u = u.astype(dtype, copy=False)
    ny, nx = u.shape
    nfy, nfx = len(fy), len(fx)
    cost_x_first = ny * nx * nfx + nfy * ny * nfx
    cost_y_first = nfy * ny * nx + nfy * nx * nfx
    out = ey @ (u @ ex) if cost_x_first <= cost_y_first else ey @ u @ ex
    out *= dx * dy
    return out


def _screen_phase(xs, ys, wavelength, z, dtype, curvature: float = 1.0):
    """exp(iπ (x² + y²) c / (λ z)) on the screen as separable factors (row, column)."""
    a = math.pi * curvature / (wavelength * z)
    px = np.exp(1j * a * np.asarray(xs, np.float64) ** 2).astype(dtype)
    py = np.exp(1j * a * np.asarray(ys, np.float64) ** 2).astype(dtype)
    return py[:, None], px[None, :]


def fraunhofer(
    u: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    wavelength: float,
    z: float,
    xs: np.ndarray,
    ys: np.ndarray,
    *,
    pitch: tuple[float, float] | None = None,
) -> np.ndarray:
    """Fraunhofer far field on the screen pixels (xs, ys) at distance ``z``.

    ``U(x, y) = exp(ikz) exp(iπ(x² + y²)/(λz)) / (iλz) · A(x/(λz), y/(λz))``, with
    A the Fourier transform of ``u`` (Goodman §4.3, eq. 4-25), evaluated by the
    matrix Fourier transform so that any screen window and pitch is exact.
    The quadratic phase across the aperture, π(ξ² + η²)/(λz), is neglected.
    """
    dtype = _complex_dtype(u)
    spec = matrix_dft(
        u, x, y, np.asarray(xs) / (wavelength * z), np.asarray(ys) / (wavelength * z), pitch=pitch
    )
    py, px = _screen_phase(xs, ys, wavelength, z, dtype)
    k = 2.0 * math.pi / wavelength
    pre = np.exp(1j * ((k * z) % (2 * math.pi))) / (1j * wavelength * z)
    spec *= py  # in place, in the order of spec · py · px · pre
    spec *= px
    spec *= dtype.type(pre)
    return spec


def lens_phase(x: np.ndarray, y: np.ndarray, wavelength: float, focal_length: float):
    """Thin-lens transmittance exp(−iπ(x² + y²)/(λf)) as separable factors (row, column).

    Goodman §5.1, eq. 5-10.
    """
    a = -math.pi / (wavelength * focal_length)
    return (
        np.exp(1j * a * np.asarray(y, np.float64) ** 2)[:, None],
        np.exp(1j * a * np.asarray(x, np.float64) ** 2)[None, :],
    )


def fresnel_impulse_response(
    u: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    wavelength: float,
    z: float,
    xs: np.ndarray,
    ys: np.ndarray,
    *,
    focal_length: float | None = None,
    pitch: tuple[float, float] | None = None,
) -> np.ndarray:
    """Fresnel diffraction integral in its single-transform (impulse-response) form.

    ``U(x) = exp(ikz)/(iλz) exp(iπx²/(λz)) · F[u(ξ) exp(iπξ²/(λz))](x/(λz))``
    (Goodman §4.2, eq. 4-17), on arbitrary screen pixels through the matrix
    Fourier transform. A thin lens of focal length f right behind the aperture
    multiplies the input by exp(−iπξ²/(λf)); the two chirps combine into
    exp(iπξ²(1/z − 1/f)/λ), which vanishes in the back focal plane z = f, where
    the result is the exact Fourier transform of the aperture field
    (Goodman §5.2.2).
    """
    dtype = _complex_dtype(u)
    inv = 1.0 / z - (1.0 / focal_length if focal_length else 0.0)
    if inv != 0.0:
        a = math.pi * inv / wavelength
        cy = np.exp(1j * a * np.asarray(y, np.float64) ** 2).astype(dtype)[:, None]
        cx = np.exp(1j * a * np.asarray(x, np.float64) ** 2).astype(dtype)[None, :]
        u = u * cy  # a new array: the caller's field is not modified
        u *= cx
    return fraunhofer(u, x, y, wavelength, z, xs, ys, pitch=pitch)


def fresnel_transfer_kernel(
    shape: tuple[int, int], dx: float, dy: float, wavelength: float, z: float, dtype=np.complex64
) -> np.ndarray:
    """Fresnel transfer function exp(ikz) exp(−iπλz(fx² + fy²)) in FFT order, (ny, nx).

    Goodman §4.2.3, eq. 4-21. Separable, so it is built as an outer product.
    """
    ny, nx = shape
    dtype = np.dtype(dtype)
    fx = np.fft.fftfreq(nx, dx)
    fy = np.fft.fftfreq(ny, dy)
    k = 2.0 * math.pi / wavelength
    # Phases in float64, then the outer product in the kernel's own precision:
    # no double-precision (ny, nx) temporary.
    hx = np.exp(-1j * math.pi * wavelength * z * fx**2).astype(dtype)
    hy = np.exp(-1j * (math.pi * wavelength * z * fy**2 - (k * z) % (2 * math.pi))).astype(dtype)
    return np.multiply.outer(hy, hx)


def band_limit(n: int, d: float, wavelength: float, z: float) -> float:
    """Matsushima–Shimobaba band limit u_limit = 1/(λ √((2Δu z)² + 1)), Δu = 1/(n d).

    Above it the sampled transfer function aliases (Matsushima & Shimobaba 2009, eq. 13).
    """
    du = 1.0 / (n * d)
    return 1.0 / (wavelength * math.sqrt((2.0 * du * z) ** 2 + 1.0))


def angular_spectrum_kernel(
    shape: tuple[int, int],
    dx: float,
    dy: float,
    wavelength: float,
    z: float,
    *,
    limit: bool = True,
    rolloff: float = 0.2,
    band: tuple[float, float] | None = None,
    dtype=np.complex64,
) -> np.ndarray:
    """Band-limited angular-spectrum transfer function in FFT order, shape (ny, nx).

    ``H = exp(2πi z √(1/λ² − fx² − fy²))`` for propagating waves and the decaying
    exp(−2π z √(fx² + fy² − 1/λ²)) for evanescent ones (Goodman §3.10.2), set
    to zero beyond the band limit of Matsushima & Shimobaba (2009), which
    removes the aliasing of the sampled kernel at long distances.

    ``band`` (fx, fy), cycles/m, rolls the kernel off from |f| = band to 1.5·band
    with a raised cosine along each axis (an infinite entry leaves that axis
    alone): a grid sized to carry that band then drops the folded-back part of
    the frequencies beyond its Nyquist limit instead of propagating it.
    """
    ny, nx = shape
    dtype = np.dtype(dtype)
    fx = np.fft.fftfreq(nx, dx)
    fy = np.fft.fftfreq(ny, dy)
    fx2, fy2 = fx**2, fy**2
    inv_l = 1.0 / wavelength
    inv_l2 = inv_l * inv_l
    two_pi = 2.0 * math.pi
    carrier = (two_pi * z * inv_l) % two_pi
    # One float64 phase array, reused in place. The carrier exp(ikz) is split
    # off so the phase stays small, and √(1/λ² − f²) − 1/λ = −f²/(√… + 1/λ) is
    # formed without cancellation.
    f2 = np.add.outer(fy2, fx2)
    evanescent = f2 > inv_l2 if fy2.max() + fx2.max() > inv_l2 else None
    root = np.subtract(inv_l2, f2)
    if evanescent is not None:
        np.abs(root, out=root)
    np.sqrt(root, out=root)
    decay = None if evanescent is None else np.exp(-two_pi * z * root[evanescent])
    root += inv_l
    phase = np.divide(f2, root, out=f2)
    del f2
    phase *= -two_pi * z
    phase += carrier
    # Reduce to [−π, π] in float64 before any cast, so single precision is exact
    # to its storage.
    turns = np.multiply(phase, 1.0 / two_pi, out=root)
    np.rint(turns, out=turns)
    turns *= two_pi
    phase -= turns
    del turns, root
    if dtype == np.complex64:
        phase = phase.astype(np.float32)
    h = np.empty(shape, dtype=dtype)
    np.cos(phase, out=h.real)
    np.sin(phase, out=h.imag)
    del phase
    if decay is not None:
        # exp(−2πz√(f² − 1/λ²)) exp(−ikz): the carrier cancels the phase exactly.
        h[evanescent] = decay
    if limit:
        ux = band_limit(nx, dx, wavelength, z)
        uy = band_limit(ny, dy, wavelength, z)
        _apply_window(h, _band_window(fy, uy, wavelength, rolloff), axis=0)
        _apply_window(h, _band_window(fx, ux, wavelength, rolloff), axis=1)
    if band is not None:
        for f, b, axis in ((fy, band[1], 0), (fx, band[0], 1)):
            if math.isfinite(b):
                s = np.clip((np.abs(f) - b) / (0.5 * b), 0.0, 1.0)
                _apply_window(h, 0.5 * (1.0 + np.cos(np.pi * s)), axis=axis)
    return h


def _apply_window(h: np.ndarray, w: np.ndarray, axis: int) -> None:
    """h *= w along ``axis``, in place, touching only the rows or columns where w < 1.

    In FFT order |f| rises to the Nyquist frequency and falls again, so the rolled-off
    part of a band window is one contiguous run in the middle.
    """
    below = np.flatnonzero(w < 1.0)
    if below.size == 0:
        return
    sl = slice(int(below[0]), int(below[-1]) + 1)
    part = w[sl].astype(h.real.dtype)
    if axis == 0:
        h[sl, :] *= part[:, None]
    else:
        h[:, sl] *= part[None, :]


def _band_window(f: np.ndarray, u_limit: float, wavelength: float, rolloff: float) -> np.ndarray:
    """1 inside the band limit, 0 outside, with a raised-cosine roll-off below it.

    A hard cut-off truncates the kernel sharply in space, and its ringing reaches
    into the window; rolling off over the top ``rolloff`` of the band smooths the
    truncation (our refinement of the rectangular limit of Matsushima &
    Shimobaba). Near the evanescent cut-off 1/λ the limit is the physical one
    and the roll-off shrinks to nothing, so steep propagating waves are kept.
    """
    width = rolloff * u_limit * min(1.0, max(0.0, 5.0 * (1.0 - wavelength * u_limit)))
    a = np.abs(f)
    if width <= 0.0:
        return (a <= u_limit).astype(np.float64)
    s = np.clip((a - (u_limit - width)) / width, 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * s))


def propagate_fft(
    u_padded: np.ndarray, kernel: np.ndarray, *, overwrite: bool = False
) -> np.ndarray:
    """Convolution propagation: IFFT[FFT(u) · H] on the padded grid, same shape.

    ``u_padded`` must already be zero-padded (twice the support, for a linear
    rather than circular convolution). It is not modified unless ``overwrite``
    is set; then the whole propagation may run in place in it, with no other
    grid-sized array (pass it when the padded field is a temporary, and allocate
    it with :func:`compute.fft.zeros` so the FFT can work on it in place).
    """
    spec = _fft.fft2(u_padded, overwrite=overwrite)
    return _fft.multiply_ifft2(spec, kernel)


def spectrum_to_points(
    u_padded: np.ndarray,
    kernel: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    xs: np.ndarray,
    ys: np.ndarray,
    *,
    overwrite: bool = False,
) -> np.ndarray:
    """Convolution propagation evaluated at arbitrary screen pixels (xs, ys).

    The propagated field is the trigonometric series Σ A(f) H(f) exp(2πi f·x) Δf
    over the FFT frequencies; evaluating it by a matrix Fourier transform at the
    screen pixels is exact for any pitch inside the periodic window, where
    slicing the inverse FFT would need the pixels on the grid. With
    ``overwrite`` the transform may run in place in ``u_padded``.
    """
    ny, nx = u_padded.shape
    dx, dy = _pitch(x), _pitch(y)
    fx = np.fft.fftfreq(nx, dx)
    fy = np.fft.fftfreq(ny, dy)
    spec = _fft.fft2(u_padded, overwrite=overwrite)
    # FFT index 0 sits at x[0], not at 0: restore the absolute phase. The pixel
    # area rides on the row factor, saving a pass over the grid.
    dtype = spec.dtype
    spec *= (dx * dy * np.exp(-2j * math.pi * fy * y[0])).astype(dtype)[:, None]
    spec *= (np.exp(-2j * math.pi * fx * x[0]).astype(dtype))[None, :]
    spec *= kernel
    df = (1.0 / (nx * dx), 1.0 / (ny * dy))
    out = matrix_dft(spec, fx, fy, xs, ys, pitch=df, sign=+1.0)
    return out


def rayleigh_sommerfeld(
    u: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    wavelength: float,
    z: float,
    px: np.ndarray,
    py: np.ndarray,
    *,
    pitch: tuple[float, float] | None = None,
    chunk: int = 4_000_000,
) -> np.ndarray:
    """First Rayleigh–Sommerfeld integral by direct summation at chosen points.

    ``U(P) = ∫∫ u(ξ, η) (z / (2π r²)) (1/r − ik) exp(ikr) dξ dη`` with r the
    distance from (ξ, η, 0) to P = (px, py, z) (Goodman §3.5, eq. 3-41, with
    the exact derivative of the Green's function). No approximation beyond the
    sampling of ``u``; the cost is (nonzero aperture samples) × (points).

    Parameters
    ----------
    px, py
        Coordinates of the points, any equal shapes; the result has that shape.
    chunk
        Largest number of (aperture sample, point) pairs held at once.
    """
    dx = _pitch(x, pitch[0] if pitch else None)
    dy = _pitch(y, pitch[1] if pitch else None)
    k = 2.0 * math.pi / wavelength
    px = np.asarray(px, np.float64)
    py = np.asarray(py, np.float64)
    shape = np.broadcast(px, py).shape
    qx = np.broadcast_to(px, shape).ravel()
    qy = np.broadcast_to(py, shape).ravel()
    jj, ii = np.nonzero(u)
    w = u[jj, ii].astype(np.complex128) * (dx * dy)
    sx = np.asarray(x, np.float64)[ii]
    sy = np.asarray(y, np.float64)[jj]
    out = np.zeros(qx.size, dtype=np.complex128)
    step = max(1, chunk // max(1, w.size))
    z2 = z * z
    for s in range(0, qx.size, step):
        ex = qx[s : s + step, None] - sx[None, :]
        ey = qy[s : s + step, None] - sy[None, :]
        r2 = ex * ex + ey * ey + z2
        r = np.sqrt(r2)
        h = (z / (2.0 * math.pi * r2)) * (1.0 / r - 1j * k) * np.exp(1j * k * r)
        out[s : s + step] = h @ w
    return out.reshape(shape)


# Screen points handed to one non-uniform transform: bounds the temporaries.
_FAR_FIELD_CHUNK = 1 << 20


def rayleigh_sommerfeld_far_field(
    u: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    wavelength: float,
    z: float,
    xs: np.ndarray,
    ys: np.ndarray,
    *,
    pitch: tuple[float, float] | None = None,
) -> np.ndarray:
    """Far field of the first Rayleigh–Sommerfeld integral at any angle, on screen pixels.

    With r the distance from the aperture's reference point c (the grid sample
    nearest its centre) to the screen pixel P = (xs, ys, z) and the unit
    direction (α, β) = ((xs − c_x)/r, (ys − c_y)/r), expanding the distance to an
    aperture point ξ to first order, |P − ξ| ≈ r − α (ξ − c_x) − β (η − c_y), gives

    ``U(P) = (z/r) · exp(ikr)/(iλr) · (1 + i/(kr)) · A(α/λ, β/λ)``,

    with A the Fourier transform of ``u`` about c (Goodman §3.5, eq. 3-41, with the
    exact derivative of the Green's function at c; the far-field expansion of
    Goodman §4.3 without the paraxial step r ≈ z). The obliquity factor z/r, the
    1/r fall-off and the spherical phase are kept; only the term of second order
    in the aperture coordinates, k|ξ − c|²/(2r) at most, is dropped, which the
    planner's ``fraunhofer_phase`` item bounds.

    The directions are not on a grid and do not separate into a row and a
    column factor, so A is a non-uniform discrete Fourier transform of the
    aperture samples: a type-2 non-uniform FFT (Barnett, Magland & af Klinteberg
    2019, library finufft), tolerance 1e-6 in single and 1e-11 in double precision.
    The result is the midpoint sum of the area-weighted samples, like the other
    propagators; it is returned as complex128.

    References
    ----------
    J. W. Goodman, *Introduction to Fourier Optics*, 3rd ed. (2005), §3.5 and §4.3.
    A. H. Barnett, J. Magland and L. af Klinteberg, SIAM J. Sci. Comput. 41,
    C479–C504 (2019).
    """
    import finufft  # a compiled extension: loaded only when this route runs

    dtype = _complex_dtype(u)
    dx = _pitch(x, pitch[0] if pitch else None)
    dy = _pitch(y, pitch[1] if pitch else None)
    ny, nx = u.shape
    cx = float(x[0]) + (nx // 2) * dx  # mode m = i − nx//2 sits at cx + m dx
    cy = float(y[0]) + (ny // 2) * dy
    u = np.ascontiguousarray(u, dtype=dtype)
    eps = 1e-6 if dtype == np.complex64 else 1e-11
    real = np.float32 if dtype == np.complex64 else np.float64
    k = 2.0 * math.pi / wavelength
    sx = np.asarray(xs, np.float64) - cx
    sy = np.asarray(ys, np.float64) - cy
    out = np.empty((sy.size, sx.size), dtype=np.complex128)
    rows = max(1, _FAR_FIELD_CHUNK // max(1, sx.size))
    two_pi = 2.0 * math.pi
    for j0 in range(0, sy.size, rows):
        py = sy[j0 : j0 + rows, None]
        r = np.sqrt(sx[None, :] ** 2 + py**2 + z * z)
        # Phase per sample of exp(−ik α ξ): 2π α dx/λ, folded into [−π, π).
        tx = (two_pi / wavelength) * dx * sx[None, :] / r
        ty = (two_pi / wavelength) * dy * py / r
        tx = np.broadcast_to(tx, r.shape)
        ty = np.broadcast_to(ty, r.shape)
        tx = ((tx + math.pi) % two_pi - math.pi).astype(real).ravel()
        ty = ((ty + math.pi) % two_pi - math.pi).astype(real).ravel()
        a = finufft.nufft2d2(ty, tx, u, eps=eps, isign=-1).reshape(r.shape)
        kr = np.mod(k * r, two_pi)
        pre = (z * dx * dy / (1j * wavelength)) * np.exp(1j * kr) / (r * r) * (1.0 + 1j / (k * r))
        out[j0 : j0 + rows] = pre * a
    return out
