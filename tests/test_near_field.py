"""Near-field results: Talbot self-images and the angular spectrum against direct integration."""

import math

import numpy as np
import pytest
import scipy.integrate
from benchsetup import bench, centre_row

from compute import analytic, model
from compute.engine import compute

LAM = 6.328e-7


def _fringe_phase(x, cut, period):
    """Phase of the fundamental Fourier component of a fringe cut."""
    return float(np.angle(np.sum(cut * np.exp(-2j * math.pi * x / period))))


@pytest.mark.parametrize("fraction, shift", [(1.0, 0.0), (0.5, math.pi)])
def test_talbot_self_image(fraction, shift):
    # Talbot (1836), Rayleigh (1881); Goodman, Introduction to Fourier Optics, 3rd ed.,
    # §4.5.2 (problem 4-16): a periodic field re-images at z_T = 2d²/λ, and at z_T/2
    # with a shift of half a period.
    d = 5e-5
    g = model.Grating(count=20, period=d, width=d / 2, height=2e-4)
    z = fraction * float(analytic.talbot_distance(d, LAM))
    s = bench(g, distance=z, width=4 * d, height=2e-5, samples=100)
    r = compute(s, use_cache=False)
    x, cut = centre_row(r)
    # Opening centres sit at g.x + (k − (count − 1)/2)·d; the fundamental of the
    # grating's own transmittance has the phase −2π·(centre)/d.
    grating_phase = -2 * math.pi * (g.x - (g.count - 1) / 2 * d) / d
    delta = np.angle(np.exp(1j * (_fringe_phase(x, cut, d) - grating_phase - shift)))
    assert abs(delta) < 0.1
    # The self-image keeps a high contrast.
    assert (cut.max() - cut.min()) / (cut.max() + cut.min()) > 0.8


def _rs_reference(diameter, z, px, py):
    """First Rayleigh–Sommerfeld integral over a disk by adaptive quadrature.

    Goodman §3.5, eq. 3-41 with the exact kernel (z / 2πr²)(1/r − ik) e^{ikr};
    integrated with scipy.integrate.quad in polar coordinates (unit plane wave).
    """
    k = 2 * math.pi / LAM
    a = diameter / 2

    def kernel(rho, phi, part):
        r2 = (px - rho * math.cos(phi)) ** 2 + (py - rho * math.sin(phi)) ** 2 + z * z
        r = math.sqrt(r2)
        h = (z / (2 * math.pi * r2)) * (1 / r - 1j * k) * complex(math.cos(k * r), math.sin(k * r))
        return (h.real if part == 0 else h.imag) * rho

    out = []
    for part in (0, 1):

        def inner(phi, part=part):
            return scipy.integrate.quad(kernel, 0, a, args=(phi, part), limit=200, epsabs=1e-10)[0]

        out.append(scipy.integrate.quad(inner, 0, 2 * math.pi, limit=200, epsabs=1e-9)[0])
    return complex(out[0], out[1])


@pytest.mark.parametrize("method", ["angular_spectrum", "rayleigh_sommerfeld"])
def test_near_field_against_direct_integration(method):
    # A disk 8 wavelengths across, observed 3 wavelengths behind it: far outside any
    # paraxial form. Reference: Goodman §3.5 integrated by scipy.integrate.quad.
    lam = LAM
    d = 8 * lam
    z = 3 * lam
    s = bench(
        model.Circle(diameter=d),
        wavelength=lam,
        distance=z,
        width=2 * d,
        height=2 * d,
        samples=41,
        method=method,
        irradiance=1.0,
    )
    r = compute(s, use_cache=False)
    ii = [20, 26, 32]  # on axis, inside the rim, outside the rim
    scale = np.max(r.intensity)
    for i in ii:
        ref = abs(_rs_reference(d, z, r.x[i], r.y[20])) ** 2
        assert r.intensity[20, i] == pytest.approx(ref, abs=0.02 * scale)


def test_on_axis_near_field_exact():
    # Goodman §4.5.1 (exact on-axis Rayleigh–Sommerfeld result for a circular aperture)
    # holds at any distance; check it a few wavelengths behind a small disk.
    d = 10 * LAM
    for z in (2 * LAM, 5 * LAM):
        s = bench(
            model.Circle(diameter=d),
            distance=z,
            width=4 * LAM,
            samples=5,
            method="angular_spectrum",
        )
        r = compute(s, use_cache=False)
        ref = float(analytic.circle_on_axis(z, d, LAM, 100.0, exact=True))
        assert r.intensity[2, 2] == pytest.approx(ref, abs=0.02 * 400.0)
