"""True colour: the CIE 1931 observer, sRGB, and what the eye sees on the screen."""

from __future__ import annotations

import sys
import unittest.mock
import warnings

import numpy as np
import pytest

from compute import colour, engine
from compute.model import Aperture, Circle, Screen, Setup, Source

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # colour-science warns that matplotlib is absent
    import colour as colour_science
    from colour.colorimetry.datasets.cmfs import DATA_CMFS_STANDARD_OBSERVER

# Without matplotlib, colour-science puts mock modules in its place; they would make
# the plotting libraries of later tests in this process believe matplotlib exists.
for _name in [n for n, m in sys.modules.items() if isinstance(m, unittest.mock.Mock)]:
    del sys.modules[_name]


def test_the_table_is_the_cie_1931_standard_observer():
    # CIE 1931 2° colour-matching functions (CIE 015:2018; CIE 018:2019), as published in
    # the colour-science package (a reference library from the registry).
    data = DATA_CMFS_STANDARD_OBSERVER["CIE 1931 2 Degree Standard Observer"]
    assert len(colour.CMF_TABLE) == 81
    for nm, x, y, z in colour.CMF_TABLE:
        assert (x, y, z) == tuple(data[nm])
    assert colour.cmf(555e-9)[1] == 1.0  # ȳ peaks at 555 nm (CIE 015:2018)
    assert np.all(colour.cmf(np.array([300e-9, 1064e-9])) == 0.0)


def test_srgb_matrix_and_transfer_function_follow_iec_61966_2_1():
    # IEC 61966-2-1 as implemented by colour-science.
    space = colour_science.models.RGB_COLOURSPACE_sRGB
    assert np.allclose(colour.XYZ_TO_LINEAR_SRGB, space.matrix_XYZ_to_RGB, atol=1e-4)
    c = np.linspace(0.0, 1.0, 101)
    assert np.allclose(
        colour.encode_srgb(c), colour_science.models.eotf_inverse_sRGB(c), atol=1e-12
    )
    # D65 white (Y = 1) maps to equal linear components near 1 (IEC 61966-2-1).
    d65 = colour_science.xy_to_XYZ([0.3127, 0.3290])
    assert np.allclose(colour.xyz_to_linear_srgb(d65), 1.0, atol=2e-3)


def _uniform(src: Source) -> Setup:
    """A clear aperture: the screen shows the unobstructed beam, the same at every λ."""
    return Setup(
        source=src,
        aperture=Aperture(background="clear", elements=[]),
        screen=Screen(distance=0.3, width=0.004, height=0.004, samples=16),
    )


@pytest.mark.parametrize(("nm", "dominant"), [(450, 2), (532, 1), (700, 0)])
def test_spectral_colours_render_with_their_dominant_channel(nm, dominant):
    res = engine.compute(_uniform(Source(kind="plane", wavelength=nm * 1e-9)), use_cache=False)
    rgb = colour.true_colour_image(res, Source(kind="plane", wavelength=nm * 1e-9))
    assert rgb.shape == (16, 16, 3) and rgb.dtype == np.uint8
    pixel = rgb[8, 8].astype(int)
    # 450 nm is seen blue, 532 nm green, 700 nm red (CIE 1931 colour-matching functions,
    # CIE 015:2018, through sRGB, IEC 61966-2-1).
    assert pixel[dominant] == 255
    others = [pixel[c] for c in range(3) if c != dominant]
    assert max(others) < 0.7 * 255


def test_a_flat_visible_spectrum_renders_close_to_neutral():
    src = Source(kind="plane", wavelength=580e-9, spectrum="flat", bandwidth=400e-9)
    res = engine.compute(_uniform(src), use_cache=False)
    xyz = colour.screen_xyz(res, src)
    assert xyz.shape == (16, 16, 3)
    # An equal-energy spectrum over 380–780 nm has the chromaticity of illuminant E,
    # x = y = 1/3 (CIE 015:2018), which sRGB shows as a near-neutral, faintly warm white.
    x, y = colour.chromaticity(xyz[8, 8])
    assert x == pytest.approx(1 / 3, abs=0.006) and y == pytest.approx(1 / 3, abs=0.006)
    rgb = colour.true_colour(xyz)[8, 8]
    assert rgb.max() == pytest.approx(1.0) and rgb.max() - rgb.min() < 0.15
    # One wavelength of the same band would be strongly coloured (a real contrast).
    mono = colour.true_colour(colour.cmf(580e-9))
    assert mono.max() - mono.min() > 0.5


def test_broad_band_fringes_are_coloured_but_their_zero_order_is_white():
    # White-light interference: every wavelength is bright at zero path difference, and the
    # fringes beyond separate the colours (Born & Wolf, Principles of Optics, 7th ed., ch. 7).
    src = Source(kind="plane", wavelength=560e-9, spectrum="flat", bandwidth=300e-9)
    setup = Setup(
        source=src,
        aperture=Aperture(
            background="opaque",
            elements=[Circle(x=-1e-4, diameter=3e-5), Circle(x=1e-4, diameter=3e-5)],
        ),
        screen=Screen(distance=0.5, width=0.01, height=0.001, samples=200),
    )
    res = engine.compute(setup, use_cache=False)
    xyz = colour.screen_xyz(res, src)
    row = xyz[xyz.shape[0] // 2]
    xy = colour.chromaticity(row)
    centre = np.argmin(np.abs(res.x))
    # On axis each wavelength has the far-field irradiance (A/(λz))² I₀ (Goodman,
    # Introduction to Fourier Optics, 3rd ed., §4.3): the zero order has the colour of the
    # flat band weighted by 1/λ², here integrated at 1 nm.
    lam = np.arange(410.5, 710.0, 1.0) * 1e-9
    zero_order = colour.chromaticity(colour.spectrum_xyz(lam, 1 / lam**2))
    assert np.hypot(*(xy[centre] - zero_order)) < 0.01
    # Off axis the fringes of the colours separate and wander much further from it.
    assert np.nanmax(np.hypot(xy[:, 0] - zero_order[0], xy[:, 1] - zero_order[1])) > 0.08


def test_no_visible_light_is_black_and_bad_brightness_is_refused():
    res = engine.compute(_uniform(Source(kind="plane", wavelength=1064e-9)), use_cache=False)
    assert np.all(colour.true_colour_image(res, Source(kind="plane", wavelength=1064e-9)) == 0)
    with pytest.raises(ValueError, match="brightness"):
        colour.true_colour(np.ones((2, 2, 3)), brightness=0.0)
    dim = colour.true_colour(colour.cmf(532e-9), brightness=0.25)
    assert dim[1] == pytest.approx(colour.encode_srgb(0.25))
