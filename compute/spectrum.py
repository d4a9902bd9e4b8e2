"""Broad-band sources: sampled wavelengths, their weights, and temporal coherence.

A source whose spectrum S(λ) (per unit wavelength, unit area) is not a single line
puts on the screen the incoherent sum of the monochromatic patterns of its
wavelengths, each weighted by its share of the irradiance. Two waves that meet at
a point with an optical path difference Δ then interfere with the modulus of the
complex degree of (temporal) coherence

    γ(Δ) = ∫ S(λ) exp(2πiΔ/λ) dλ = ∫ S_σ(σ) exp(2πiσΔ) dσ,

σ = 1/λ the wavenumber and S_σ(σ) = S(1/σ)/σ² the same spectrum per unit
wavenumber. For a narrow line of width Δλ about λ₀ (Δσ = Δλ/λ₀²) a Gaussian gives
|γ| = exp(−(πΔσΔ)²/(4 ln 2)) and a flat band |sinc(ΔσΔ)| = |sin(πΔσΔ)/(πΔσΔ)|.

Both spectra are shaped in wavelength: ``gaussian`` has its full width at half
maximum Δλ and is sampled over ±3.5 standard deviations (the weight outside,
4.7e-4, is dropped and the rest renormalised); ``flat`` is uniform over
[λ₀ − Δλ/2, λ₀ + Δλ/2].

Sampling is the midpoint rule in wavenumber over that support, so that the phase
2πσΔ of every interference term advances evenly from one sample to the next. A
comb of samples δσ apart has a coherence function that repeats every 1/δσ; the
automatic count keeps that repetition beyond the largest path difference that the
screen sees, and keeps the error of the sampled |γ| below
:data:`COHERENCE_TOLERANCE` there.

References
----------
.. [BW] M. Born and E. Wolf, *Principles of Optics*, 7th ed. (1999), ch. 10: the
   complex degree of coherence and its spectral representation (the
   Wiener–Khintchine relation for a stationary field).
.. [GS] J. W. Goodman, *Statistical Optics* (Wiley), ch. 5 (temporal coherence;
   line shapes and their complex degrees of coherence).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from .model import FWHM_PER_SIGMA, GAUSSIAN_SPAN

__all__ = [
    "COHERENCE_TOLERANCE",
    "MAX_AUTO_SAMPLES",
    "SpectralSamples",
    "coherence_length",
    "degree_of_coherence",
    "density",
    "narrowband_coherence",
    "needed_samples",
    "sample",
    "support",
]

COHERENCE_TOLERANCE = 0.005  # largest error of the sampled |γ| within the path differences
COHERENCE_FLOOR = 1e-3  # |γ| below this is taken as no coherence
MAX_AUTO_SAMPLES = 64
KINDS = ("gaussian", "flat")


def _check(kind: str, centre: float, width: float) -> None:
    if kind not in KINDS:
        raise ValueError(f"spectrum must be one of {', '.join(KINDS)}, got {kind!r}")
    if not (math.isfinite(centre) and centre > 0):
        raise ValueError(f"the centre wavelength must be positive, got {centre!r}")
    if not (math.isfinite(width) and width > 0):
        raise ValueError(f"the bandwidth must be positive, got {width!r}")
    lo, _ = support(kind, centre, width)
    if lo <= 0:
        raise ValueError(f"a {kind} spectrum {width:g} m wide about {centre:g} m reaches λ ≤ 0")


def _sigma(width: float) -> float:
    return width / FWHM_PER_SIGMA


def support(kind: str, centre: float, width: float) -> tuple[float, float]:
    """Wavelengths (shortest, longest) over which the spectrum is sampled, m."""
    half = GAUSSIAN_SPAN * _sigma(width) if kind == "gaussian" else 0.5 * width
    return centre - half, centre + half


def density(kind: str, centre: float, width: float, wavelength: npt.ArrayLike) -> np.ndarray:
    """Spectral density S(λ) per unit wavelength, 1/m, of unit area over its support.

    Zero outside :func:`support`.
    """
    _check(kind, centre, width)
    lam = np.asarray(wavelength, dtype=np.float64)
    lo, hi = support(kind, centre, width)
    inside = (lam >= lo) & (lam <= hi)
    if kind == "flat":
        return np.where(inside, 1.0 / width, 0.0)
    s = _sigma(width)
    # Area of the Gaussian truncated at ±GAUSSIAN_SPAN standard deviations.
    area = s * math.sqrt(2.0 * math.pi) * math.erf(GAUSSIAN_SPAN / math.sqrt(2.0))
    return np.where(inside, np.exp(-0.5 * ((lam - centre) / s) ** 2) / area, 0.0)


_GL_T, _GL_W = np.polynomial.legendre.leggauss(16)


def degree_of_coherence(
    kind: str, centre: float, width: float, path_difference: npt.ArrayLike
) -> np.ndarray:
    """Complex degree of coherence γ(Δ) = ∫ S(λ) exp(2πiΔ/λ) dλ of the spectrum.

    Evaluated in wavenumber by composite 16-point Gauss–Legendre quadrature, with at
    least four panels per fringe that the band spans at the largest Δ, so that it is
    accurate to about 1e-12 (Born & Wolf ch. 10).
    """
    _check(kind, centre, width)
    lo, hi = support(kind, centre, width)
    s_lo, s_hi = 1.0 / hi, 1.0 / lo
    d = np.asarray(path_difference, dtype=np.float64)
    fringes = (s_hi - s_lo) * float(np.max(np.abs(d))) if d.size else 0.0
    panels = max(8, math.ceil(4.0 * fringes))
    edges = np.linspace(s_lo, s_hi, panels + 1)
    half = 0.5 * (edges[1:] - edges[:-1])
    sig = ((edges[:-1] + half)[:, None] + half[:, None] * _GL_T[None, :]).ravel()
    ws = (half[:, None] * _GL_W[None, :]).ravel() * density(kind, centre, width, 1.0 / sig)
    ws /= sig**2
    phase = np.multiply.outer(d, sig)
    return (np.exp(2j * np.pi * phase) @ ws) / ws.sum()


def narrowband_coherence(
    kind: str, centre: float, width: float, path_difference: npt.ArrayLike
) -> np.ndarray:
    """|γ(Δ)| of a narrow line, in closed form (Goodman, Statistical Optics, ch. 5).

    Gaussian: exp(−(πΔσΔ)²/(4 ln 2)); flat: |sinc(ΔσΔ)|; Δσ = Δλ/λ₀². The
    truncation of the Gaussian and the curvature of σ = 1/λ are neglected.
    """
    _check(kind, centre, width)
    d = np.asarray(path_difference, dtype=np.float64)
    dsig = width / centre**2
    if kind == "gaussian":
        return np.exp(-((np.pi * dsig * d) ** 2) / (4.0 * math.log(2.0)))
    return np.abs(np.sinc(dsig * d))


def coherence_length(centre: float, width: float) -> float:
    """λ₀²/Δλ, m: the path difference over which the fringes fade (common practice, no source)."""
    return math.inf if width <= 0 else centre**2 / width


def needed_samples(
    kind: str, centre: float, width: float, path_difference: float, max_step: float | None = None
) -> int:
    """Spectral samples that hold |γ| to :data:`COHERENCE_TOLERANCE` up to ``path_difference``.

    ``max_step`` (m) also bounds the spacing of the samples in wavelength, for a
    quantity that varies with wavelength by itself (the colour of the light).

    Gaussian: the samples are δσ apart with 1/δσ ≥ Δ + Δ_c, Δ_c the path difference
    where |γ| falls below :data:`COHERENCE_FLOOR`, so that the first repetition of the
    sampled coherence function, at 1/δσ, lies beyond the screen's path differences
    by more than its own width. Flat: the sampled band gives sin(πx)/(N sin(πx/N)) for the exact
    sinc(x), x = ΔσΔ; N is the least count whose difference, at most
    min(1, πx)(1/sin u − 1/u)/N with u = πx/N, stays within the tolerance (and u ≤ 1,
    well before the repetition).
    """
    _check(kind, centre, width)
    lo, hi = support(kind, centre, width)
    n_step = 1 if not max_step else math.ceil((hi - lo) / max_step - 1e-9)
    return max(n_step, _coherence_samples(kind, centre, width, lo, hi, path_difference))


def _coherence_samples(kind, centre, width, lo, hi, path_difference) -> int:
    band = 1.0 / lo - 1.0 / hi  # support in wavenumber, 1/m
    d = max(0.0, float(path_difference))
    if kind == "gaussian":
        s_sig = _sigma(width) / centre**2
        d_c = math.sqrt(0.5 * math.log(1.0 / COHERENCE_FLOOR)) / (math.pi * s_sig)
        n = math.ceil(band * (d + d_c))
        return max(1, n + (1 - n % 2))  # odd: one sample in the middle of the band
    x = band * d
    if x <= 0.0:
        return 1
    n = max(1, math.ceil(math.pi * x))  # u ≤ 1
    while True:
        u = math.pi * x / n
        err = min(1.0, math.pi * x) * (1.0 / math.sin(u) - 1.0 / u) / n
        if err <= COHERENCE_TOLERANCE:
            return n
        n += 1


@dataclass(frozen=True)
class SpectralSamples:
    """Sampled wavelengths of a spectrum and the share of the irradiance each carries.

    ``wavelengths`` (m, ascending) and ``weights`` (sum 1) have equal lengths;
    ``needed`` is the count the automatic rule asks for at ``path_difference``.
    """

    kind: str
    centre: float
    width: float
    wavelengths: np.ndarray
    weights: np.ndarray
    needed: int
    path_difference: float
    auto: bool

    @property
    def count(self) -> int:
        return int(self.wavelengths.size)


def sample(
    kind: str,
    centre: float,
    width: float,
    *,
    count: int = 0,
    path_difference: float = 0.0,
    max_step: float | None = None,
    max_auto: int = MAX_AUTO_SAMPLES,
) -> SpectralSamples:
    """Wavelengths and weights of a spectrum for the incoherent sum over wavelengths.

    Parameters
    ----------
    kind, centre, width
        ``'gaussian'`` (FWHM ``width``) or ``'flat'`` (full width ``width``) about
        ``centre``; metres.
    count
        Number of samples; 0 for :func:`needed_samples` at ``path_difference``,
        capped at ``max_auto``.
    path_difference
        Largest optical path difference that the screen sees, m.
    max_step
        Largest spacing of the automatic samples in wavelength, m (None: no bound).

    Notes
    -----
    Midpoint rule in wavenumber over the support: σ_k = σ_lo + (k + ½)δσ with
    weights S(λ_k) λ_k² δσ (the spectrum per unit wavenumber), normalised to 1. A
    single sample is the centre wavelength itself.
    """
    _check(kind, centre, width)
    needed = needed_samples(kind, centre, width, path_difference, max_step)
    auto = count == 0
    n = min(needed, max_auto) if auto else int(count)
    if n < 1:
        raise ValueError(f"count must be ≥ 0, got {count!r}")
    if n == 1:
        lam, w = np.array([centre]), np.array([1.0])
    else:
        lo, hi = support(kind, centre, width)
        s_lo, s_hi = 1.0 / hi, 1.0 / lo
        sig = s_lo + (np.arange(n) + 0.5) * (s_hi - s_lo) / n
        lam = 1.0 / sig[::-1]
        w = density(kind, centre, width, lam) * lam**2
        w = w / w.sum()
    return SpectralSamples(
        kind=kind,
        centre=float(centre),
        width=float(width),
        wavelengths=lam,
        weights=w,
        needed=needed,
        path_difference=float(path_difference),
        auto=auto,
    )
