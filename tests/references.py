"""Reference values computed independently of the engine, shared by several test files."""

from __future__ import annotations

import math

from scipy import integrate


def reference_coherence(kind: str, width: float, delta: float, centre: float) -> float:
    """|γ(Δ)| = |∫ S(λ) exp(2πiΔ/λ) dλ| / ∫ S(λ) dλ of the model's spectrum (scipy quad).

    ``kind`` 'gaussian' (FWHM ``width``, cut at ±3.5 σ as the model cuts it) or
    'flat' (full width ``width``), centred on ``centre``; ``delta`` the path
    difference, m. Born & Wolf, Principles of Optics, 7th ed., ch. 10.
    """
    if kind == "gaussian":
        s = width / (2 * math.sqrt(2 * math.log(2)))
        lo, hi = centre - 3.5 * s, centre + 3.5 * s

        def dens(lam):
            return math.exp(-0.5 * ((lam - centre) / s) ** 2)
    else:
        lo, hi = centre - width / 2, centre + width / 2

        def dens(lam):
            return 1.0

    def part(f):
        return integrate.quad(
            lambda lam: dens(lam) * f(2 * math.pi * delta / lam),
            lo,
            hi,
            limit=400,
            epsabs=0,
            epsrel=1e-10,
        )[0]

    norm = integrate.quad(dens, lo, hi, epsabs=0, epsrel=1e-12)[0]
    return math.hypot(part(math.cos), part(math.sin)) / norm
