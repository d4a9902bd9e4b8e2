"""True colour: what the eye would see on the screen, as sRGB.

A spectral irradiance E(λ) has the CIE 1931 tristimulus values
X = ∫ E x̄ dλ, Y = ∫ E ȳ dλ, Z = ∫ E z̄ dλ with the colour-matching functions of the
2° standard observer. A monochromatic pattern of irradiance I at λ has
(X, Y, Z) = I · (x̄, ȳ, z̄)(λ); a broad-band one is the sum over its sampled
wavelengths. The tristimulus values go to linear sRGB through the matrix of
IEC 61966-2-1, colours outside the sRGB gamut (every monochromatic one) are
clipped at zero, the image is scaled so that its brightest pixel reaches full
scale, and the sRGB transfer function encodes it for display.

No chromatic adaptation is applied: an equal-energy spectrum shows as the slightly
warm white that it is on a D65 display.

References
----------
.. [CIE] CIE 015:2018, *Colorimetry*, 4th ed.; the CIE 1931 2° standard observer
   (tabulated in CIE 018:2019 / ISO/CIE 11664-1). The table below holds its values
   at 5 nm from 380 nm to 780 nm, taken from the ``colour-science`` package
   (``colour.colorimetry.datasets.cmfs``, "CIE 1931 2 Degree Standard Observer");
   ``tests/test_colour.py`` checks it against that package.
.. [IEC] IEC 61966-2-1:1999, *Default RGB colour space — sRGB*: the matrix from
   XYZ to linear RGB and the transfer function (its piecewise gamma); ``tests/
   test_colour.py`` checks the matrix against the ``colour-science`` package.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

__all__ = [
    "CMF_TABLE",
    "XYZ_TO_LINEAR_SRGB",
    "chromaticity",
    "cmf",
    "encode_srgb",
    "screen_xyz",
    "spectrum_xyz",
    "true_colour",
    "true_colour_image",
    "xyz_to_linear_srgb",
]

#: CIE 1931 2° colour-matching functions: (wavelength in nm, x̄, ȳ, z̄), 5 nm steps.
CMF_TABLE: tuple[tuple[int, float, float, float], ...] = (
    (380, 0.001368, 3.9e-05, 0.006450001),
    (385, 0.002236, 6.4e-05, 0.01054999),
    (390, 0.004243, 0.00012, 0.02005001),
    (395, 0.00765, 0.000217, 0.03621),
    (400, 0.01431, 0.000396, 0.06785001),
    (405, 0.02319, 0.00064, 0.1102),
    (410, 0.04351, 0.00121, 0.2074),
    (415, 0.07763, 0.00218, 0.3713),
    (420, 0.13438, 0.004, 0.6456),
    (425, 0.21477, 0.0073, 1.0390501),
    (430, 0.2839, 0.0116, 1.3856),
    (435, 0.3285, 0.01684, 1.62296),
    (440, 0.34828, 0.023, 1.74706),
    (445, 0.34806, 0.0298, 1.7826),
    (450, 0.3362, 0.038, 1.77211),
    (455, 0.3187, 0.048, 1.7441),
    (460, 0.2908, 0.06, 1.6692),
    (465, 0.2511, 0.0739, 1.5281),
    (470, 0.19536, 0.09098, 1.28764),
    (475, 0.1421, 0.1126, 1.0419),
    (480, 0.09564, 0.13902, 0.8129501),
    (485, 0.05795001, 0.1693, 0.6162),
    (490, 0.03201, 0.20802, 0.46518),
    (495, 0.0147, 0.2586, 0.3533),
    (500, 0.0049, 0.323, 0.272),
    (505, 0.0024, 0.4073, 0.2123),
    (510, 0.0093, 0.503, 0.1582),
    (515, 0.0291, 0.6082, 0.1117),
    (520, 0.06327, 0.71, 0.07824999),
    (525, 0.1096, 0.7932, 0.05725001),
    (530, 0.1655, 0.862, 0.04216),
    (535, 0.2257499, 0.9148501, 0.02984),
    (540, 0.2904, 0.954, 0.0203),
    (545, 0.3597, 0.9803, 0.0134),
    (550, 0.4334499, 0.9949501, 0.008749999),
    (555, 0.5120501, 1.0, 0.005749999),
    (560, 0.5945, 0.995, 0.0039),
    (565, 0.6784, 0.9786, 0.002749999),
    (570, 0.7621, 0.952, 0.0021),
    (575, 0.8425, 0.9154, 0.0018),
    (580, 0.9163, 0.87, 0.001650001),
    (585, 0.9786, 0.8163, 0.0014),
    (590, 1.0263, 0.757, 0.0011),
    (595, 1.0567, 0.6949, 0.001),
    (600, 1.0622, 0.631, 0.0008),
    (605, 1.0456, 0.5668, 0.0006),
    (610, 1.0026, 0.503, 0.00034),
    (615, 0.9384, 0.4412, 0.00024),
    (620, 0.8544499, 0.381, 0.00019),
    (625, 0.7514, 0.321, 0.0001),
    (630, 0.6424, 0.265, 4.999999e-05),
    (635, 0.5419, 0.217, 3e-05),
    (640, 0.4479, 0.175, 2e-05),
    (645, 0.3608, 0.1382, 1e-05),
    (650, 0.2835, 0.107, 0.0),
    (655, 0.2187, 0.0816, 0.0),
    (660, 0.1649, 0.061, 0.0),
    (665, 0.1212, 0.04458, 0.0),
    (670, 0.0874, 0.032, 0.0),
    (675, 0.0636, 0.0232, 0.0),
    (680, 0.04677, 0.017, 0.0),
    (685, 0.0329, 0.01192, 0.0),
    (690, 0.0227, 0.00821, 0.0),
    (695, 0.01584, 0.005723, 0.0),
    (700, 0.01135916, 0.004102, 0.0),
    (705, 0.008110916, 0.002929, 0.0),
    (710, 0.005790346, 0.002091, 0.0),
    (715, 0.004109457, 0.001484, 0.0),
    (720, 0.002899327, 0.001047, 0.0),
    (725, 0.00204919, 0.00074, 0.0),
    (730, 0.001439971, 0.00052, 0.0),
    (735, 0.0009999493, 0.0003611, 0.0),
    (740, 0.0006900786, 0.0002492, 0.0),
    (745, 0.0004760213, 0.0001719, 0.0),
    (750, 0.0003323011, 0.00012, 0.0),
    (755, 0.0002348261, 8.48e-05, 0.0),
    (760, 0.0001661505, 6e-05, 0.0),
    (765, 0.000117413, 4.24e-05, 0.0),
    (770, 8.307527e-05, 3e-05, 0.0),
    (775, 5.870652e-05, 2.12e-05, 0.0),
    (780, 4.150994e-05, 1.499e-05, 0.0),
)

_CMF = np.array(CMF_TABLE, dtype=np.float64)
_CMF_NM = _CMF[:, 0]
_CMF_XYZ = _CMF[:, 1:]

#: XYZ (D65 white at Y = 1) to linear sRGB, IEC 61966-2-1.
XYZ_TO_LINEAR_SRGB = np.array(
    [
        [3.2406, -1.5372, -0.4986],
        [-0.9689, 1.8758, 0.0415],
        [0.0557, -0.2040, 1.0570],
    ]
)


def cmf(wavelength: npt.ArrayLike) -> np.ndarray:
    """Colour-matching functions (x̄, ȳ, z̄) at vacuum wavelengths in metres.

    Linear interpolation in the 5 nm table; zero outside 380–780 nm, where the eye
    sees nothing. The result has the shape of ``wavelength`` plus a last axis of 3.
    """
    nm = np.asarray(wavelength, dtype=np.float64) * 1e9
    out = np.stack(
        [np.interp(nm, _CMF_NM, _CMF_XYZ[:, c], left=0.0, right=0.0) for c in range(3)],
        axis=-1,
    )
    return out


def spectrum_xyz(wavelengths: npt.ArrayLike, weights: npt.ArrayLike) -> np.ndarray:
    """Tristimulus values (X, Y, Z) of lines of irradiance ``weights`` at ``wavelengths`` (m).

    A continuous spectrum sampled at wavelengths λ_k with irradiance E(λ_k)Δλ_k in
    each sample gives its X, Y, Z by this sum (CIE 015:2018).
    """
    w = np.asarray(weights, dtype=np.float64)
    return np.tensordot(w, cmf(wavelengths), axes=(0, 0))


def chromaticity(xyz: npt.ArrayLike) -> np.ndarray:
    """CIE 1931 chromaticity (x, y) = (X, Y) / (X + Y + Z); NaN for black."""
    a = np.asarray(xyz, dtype=np.float64)
    total = a.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return a[..., :2] / total


def xyz_to_linear_srgb(xyz: npt.ArrayLike) -> np.ndarray:
    """Linear sRGB of tristimulus values (last axis X, Y, Z), IEC 61966-2-1.

    Out-of-gamut colours come back with negative components; nothing is clipped here.
    """
    return np.asarray(xyz, dtype=np.float64) @ XYZ_TO_LINEAR_SRGB.T


def encode_srgb(linear: npt.ArrayLike) -> np.ndarray:
    """The sRGB transfer function of linear values in [0, 1], IEC 61966-2-1.

    12.92 c below 0.0031308, 1.055 c^(1/2.4) − 0.055 above; the input is clipped to [0, 1].
    """
    c = np.clip(np.asarray(linear, dtype=np.float64), 0.0, 1.0)
    return np.where(c <= 0.0031308, 12.92 * c, 1.055 * np.power(c, 1.0 / 2.4) - 0.055)


def true_colour(xyz: npt.ArrayLike, brightness: float = 1.0) -> np.ndarray:
    """Display-ready sRGB in [0, 1] of an image of tristimulus values (..., 3).

    Negative linear components (colours outside the sRGB gamut, such as every
    spectral colour) are clipped to zero; the image is scaled so that the largest
    linear component of its brightest pixel is ``brightness`` (values above 1 are
    clipped at full scale, so ``brightness`` > 1 over-exposes to show faint light),
    then encoded with the sRGB transfer function. An image with no visible light is
    black.
    """
    if not (np.isfinite(brightness) and brightness > 0):
        raise ValueError(f"brightness must be a positive number, got {brightness!r}")
    rgb = np.maximum(xyz_to_linear_srgb(xyz), 0.0)
    top = float(rgb.max()) if rgb.size else 0.0
    if top > 0.0:
        rgb *= brightness / top
    return encode_srgb(rgb)


def screen_xyz(result, source) -> np.ndarray:
    """Tristimulus values of a computed screen, shape (ny, nx, 3), in W/m²-weighted units.

    Broad-band results carry their sum over wavelengths in ``result.extras['xyz']``;
    a monochromatic result is its irradiance times the colour-matching functions at
    the source wavelength.
    """
    extra = getattr(result, "extras", {}).get("xyz")
    if extra is not None:
        return np.asarray(extra, dtype=np.float64)
    return np.asarray(result.intensity, dtype=np.float64)[..., None] * cmf(source.wavelength)


def true_colour_image(result, source, brightness: float = 1.0) -> np.ndarray:
    """The screen of ``result`` as the eye would see it: sRGB, uint8, shape (ny, nx, 3).

    Row j is at ``result.y[j]`` (y grows with the row index, as in every result
    array; flip it for a picture with y up).
    """
    rgb = true_colour(screen_xyz(result, source), brightness)
    return np.round(rgb * 255.0).astype(np.uint8)
