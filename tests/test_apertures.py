"""Rasterising aperture elements: exact and area-weighted coverage, painting, bounds,
and the quadrature weights that the propagation sums use.

Convention checked throughout: the coverage of a pixel is the fraction of its
square covered by the element, and painting is ``t·(1 − c) + c·v`` (common
practice, no source). Overlaps and areas are standard geometry, worked by hand in
the comments beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special

from compute import analytic, propagators
from compute import apertures as apertures_module
from compute.apertures import (
    aperture_bounds,
    area,
    coverage,
    element_bounds,
    feature_size,
    power_transmittance,
    quadrature_transmittance,
    smallest_feature,
    transmittance,
)
from compute.grids import centred_axis
from compute.model import Annulus, Aperture, Circle, Edge, Grating, Image, Polygon, Rect
from compute.pngdata import PngDataError, decode_png_data_url, encode_png_data_url

U = 1e-5  # one pixel in most tests, m


def edge_corrected(t):
    """The separable [1, 22, 1]/24 filter: the Euler–Maclaurin end correction of the
    midpoint rule for an edge on the pixel lines (Davis & Rabinowitz, Methods of
    Numerical Integration, 2nd ed., §2.9); zero outside the raster."""
    out = t * (22.0 / 24.0)
    out[:, 1:] += t[:, :-1] / 24.0
    out[:, :-1] += t[:, 1:] / 24.0
    res = out * (22.0 / 24.0)
    res[1:, :] += out[:-1, :] / 24.0
    res[:-1, :] += out[1:, :] / 24.0
    return res


def axis(n: int, pitch: float = U, centre: float = 0.0) -> np.ndarray:
    return centred_axis(n, pitch, centre)


def symmetric_axis(n: int, pitch: float = U) -> np.ndarray:
    """Odd number of centres, symmetric about 0."""
    assert n % 2 == 1
    return (np.arange(n) - n // 2) * pitch


def relative_area_error(el, x, y) -> float:
    dx, dy = x[1] - x[0], y[1] - y[0]
    return coverage(el, x, y).sum() * dx * dy / area(el) - 1.0


# ------------------------------------------------------------ exact coverage


def test_axis_aligned_rect_is_the_product_of_hand_computed_overlaps():
    # Pixel pitch 1 (x) by 2 (y), in units of U. The rect spans x in [-0.95, 1.55]
    # and y in [-2.0, 1.0]. Overlaps worked out by hand (pixel squares [c ± p/2]):
    # x centres -2..2 -> 0, 0.45, 1, 1, 0.05; y centres -2, 0, 2 -> 0.5, 1, 0.
    x = axis(5)  # -2 .. 2
    y = axis(3, 2 * U)  # -2, 0, 2
    el = Rect(x=0.3 * U, y=-0.5 * U, width=2.5 * U, height=3.0 * U)
    cx = np.array([0.0, 0.45, 1.0, 1.0, 0.05])
    cy = np.array([0.5, 1.0, 0.0])
    np.testing.assert_allclose(coverage(el, x, y), np.outer(cy, cx), rtol=0, atol=1e-12)


def test_rect_at_a_quarter_turn_swaps_width_and_height_exactly():
    x = axis(5)
    y = axis(3, 2 * U)
    upright = Rect(x=0.3 * U, y=-0.5 * U, width=3.0 * U, height=2.5 * U, angle=math.pi / 2)
    flat = Rect(x=0.3 * U, y=-0.5 * U, width=2.5 * U, height=3.0 * U)
    np.testing.assert_allclose(coverage(upright, x, y), coverage(flat, x, y), atol=1e-12)


def test_axis_aligned_grating_openings_match_hand_computed_overlaps():
    # Three openings 1.2 wide at period 2.5, centred on x = 0.1 (units of U): they
    # span [-3.0, -1.8], [-0.5, 0.7] and [2.0, 3.2]. Pixel overlaps by hand for
    # centres -4..4: 0, 0.5, 0.7, 0, 1, 0.2, 0.5, 0.7, 0.
    x = axis(9)
    y = axis(4)
    el = Grating(count=3, period=2.5 * U, width=1.2 * U, height=100 * U, x=0.1 * U)
    expected_x = np.array([0.0, 0.5, 0.7, 0.0, 1.0, 0.2, 0.5, 0.7, 0.0])
    np.testing.assert_allclose(coverage(el, x, y), np.tile(expected_x, (4, 1)), rtol=0, atol=1e-12)


def test_grating_with_100000_openings_matches_a_direct_sum_over_openings():
    # Reference: overlap of every pixel with every opening that the window sees,
    # summed by broadcasting (only the few hundred visible openings).
    n, count, period, width = 600, 100_000, 1.5 * U, 0.6 * U
    x = axis(n, U, centre=0.123 * U)
    y = axis(3)
    el = Grating(count=count, period=period, width=width, height=10 * U, x=0.0, y=0.0)
    centres = (np.arange(count) - (count - 1) / 2) * period
    seen = centres[np.abs(centres) < 0.6 * n * U]
    lo = np.maximum((x - U / 2)[:, None], (seen - width / 2)[None, :])
    hi = np.minimum((x + U / 2)[:, None], (seen + width / 2)[None, :])
    expected = np.clip(hi - lo, 0, None).sum(axis=1) / U
    got = coverage(el, x, y)
    np.testing.assert_allclose(got[1], expected, rtol=0, atol=1e-9)
    assert got[1].min() < 0.2 and got[1].max() > 0.59  # a real grating, not a flat grey


def test_grating_with_width_equal_to_period_is_one_solid_band():
    x = axis(40)
    y = axis(20)
    band = Grating(count=5, period=3.3 * U, width=3.3 * U, height=7.1 * U, x=0.2 * U)
    solid = Rect(width=5 * 3.3 * U, height=7.1 * U, x=0.2 * U)
    np.testing.assert_allclose(coverage(band, x, y), coverage(solid, x, y), atol=1e-12)


def test_single_sample_axis_takes_its_pitch_from_the_keyword():
    # A slit 0.5 pixel wide centred on the only column covers half of it; along y
    # it spans [-2, 2] px over centres -4..3, so rows -2 and 2 are half covered.
    el = Rect(width=0.5 * U, height=4 * U)
    cov = coverage(el, np.array([0.0]), axis(8), pitch=(U, U))
    assert cov.shape == (8, 1)
    np.testing.assert_allclose(cov[:, 0], 0.5 * np.array([0, 0, 0.5, 1, 1, 1, 0.5, 0]), atol=1e-12)
    slit = Rect(width=0.5 * U, height=100 * U)
    assert coverage(slit, np.array([0.0]), np.array([0.0]), pitch=(U, U))[0, 0] == (
        pytest.approx(0.5, abs=1e-12)
    )


# ------------------------------------------------------------- area convergence


def test_circle_area_error_is_small_at_64_pixels_and_shrinks_with_refinement():
    # Disk area π D²/4 (standard geometry).
    def worst_error(pixels_across):
        d = 1e-3
        pitch = d / pixels_across
        n = pixels_across + 6
        errors = []
        for shift in (0.0, 0.31, 0.77):
            el = Circle(diameter=d, x=shift * pitch, y=0.43 * shift * pitch)
            errors.append(abs(relative_area_error(el, axis(n, pitch), axis(n, pitch))))
        return max(errors)

    e32, e64, e128 = worst_error(32), worst_error(64), worst_error(128)
    assert e64 < 1e-3
    assert e128 < e64 < e32


def test_area_of_elements_matches_hand_values():
    # Standard geometry: disk π D²/4, ring π (D² − d²)/4; triangle ½·base·height;
    # the L is a 60×20 bar plus a 20×50 upright.
    assert area(Rect(width=3e-4, height=2e-4)) == pytest.approx(6e-8)
    assert area(Circle(diameter=2e-3)) == pytest.approx(math.pi * 1e-6)
    assert area(Annulus(diameter=2e-3, inner_diameter=1e-3)) == pytest.approx(
        math.pi * (4e-6 - 1e-6) / 4
    )
    assert area(Grating(count=7, period=1e-4, width=4e-5, height=1e-3)) == pytest.approx(
        7 * 4e-5 * 1e-3
    )
    assert area(triangle()) == pytest.approx(0.5 * 110 * U * 90 * U)
    assert area(l_shape()) == pytest.approx((60 * 20 + 20 * 50) * U * U)
    assert area(Edge()) == math.inf


def triangle(**kw) -> Polygon:
    # Base from (-50, -40) to (60, -40) (length 110), apex at height 90 above it.
    return Polygon(vertices=[[-50 * U, -40 * U], [60 * U, -40 * U], [0.0, 50 * U]], **kw)


def l_shape(**kw) -> Polygon:
    pts = [[0, 0], [60, 0], [60, 20], [20, 20], [20, 70], [0, 70]]
    return Polygon(vertices=[[(a - 30) * U, (b - 30) * U] for a, b in pts], **kw)


@pytest.mark.parametrize("angle", [0.0, 0.3, 1.1, math.pi / 2, 2.6])
@pytest.mark.parametrize("make", [triangle, l_shape], ids=["triangle", "L"])
def test_polygons_are_clipped_exactly_at_every_angle(make, angle):
    # Exact pixel clipping: the summed coverage equals the shoelace area (Gauss's
    # area formula, standard geometry) at any resolution, not only in the limit.
    for pitch in (U, 2.7 * U, 9.1 * U):
        n = int(200 * U / pitch) + 4
        x = axis(n, pitch, 0.37 * pitch)
        el = make(angle=angle, x=0.2 * U, y=-0.9 * U)
        assert abs(relative_area_error(el, x, x)) < 1e-12


def test_l_shape_coverage_is_one_inside_and_zero_in_its_notch():
    x = axis(100)
    cov = coverage(l_shape(), x, x)

    # Element-frame points: inside the bar (-20, -25), inside the upright (-25, 30),
    # in the notch (10, 10), all in units of U with pixel centres on integers.
    def at(px, py):
        return cov[int(np.searchsorted(x, py * U - U / 4)), int(np.searchsorted(x, px * U - U / 4))]

    assert at(-20, -25) == pytest.approx(1.0)
    assert at(-25, 30) == pytest.approx(1.0)
    assert at(10, 10) == pytest.approx(0.0)


@pytest.mark.parametrize("angle", [0.3, 1.0, 2.5])
def test_rotated_rect_area_is_exact(angle):
    for pitch in (U, 3.3 * U):
        x = axis(int(120 * U / pitch) + 4, pitch, 0.21 * pitch)
        el = Rect(width=63.3 * U, height=20.7 * U, angle=angle, x=0.3 * U, y=-1.1 * U)
        assert abs(relative_area_error(el, x, x)) < 1e-12


def test_rotated_grating_area_converges():
    # Rotated gratings use a box-filtered ramp (area-preserving to first order).
    def error(pitch):
        el = Grating(count=5, period=16 * U, width=7 * U, height=60 * U, angle=0.3, x=0.3 * U)
        x = axis(int(110 * U / pitch) + 4, pitch, 0.17 * pitch)
        return abs(relative_area_error(el, x, x))

    coarse, fine = error(2 * U), error(0.5 * U)
    assert fine < 1e-3
    assert fine < coarse


def test_annulus_area_converges():
    def error(pixels_across):
        d = 1e-3
        pitch = d / pixels_across
        x = axis(pixels_across + 6, pitch, 0.29 * pitch)
        return abs(relative_area_error(Annulus(diameter=d, inner_diameter=0.45 * d), x, x))

    assert error(64) < 1e-3
    assert error(128) < error(32)


def test_a_disk_smaller_than_a_pixel_keeps_its_area():
    # Supersampled below 16 pixels across; a 0.5-pixel pinhole still passes its area.
    x = axis(9, U)
    el = Circle(diameter=0.5 * U, x=0.23 * U, y=-0.31 * U)
    assert abs(relative_area_error(el, x, x)) < 1e-3


def test_coverage_stays_in_unit_interval_and_soft_at_edges():
    x = axis(80)
    for el in (
        Circle(diameter=50 * U, x=0.3 * U),
        Annulus(diameter=60 * U, inner_diameter=20 * U),
        Rect(width=30 * U, height=40 * U, angle=0.4),
        Grating(count=4, period=9 * U, width=3.3 * U, height=40 * U, angle=0.7),
        Edge(angle=1.0),
        l_shape(angle=0.5),
    ):
        cov = coverage(el, x, x)
        assert cov.min() >= 0.0 and cov.max() <= 1.0
        partial = (cov > 1e-9) & (cov < 1 - 1e-9)
        assert partial.sum() > 20, el.shape  # a hard 0/1 mask is a defect


# ------------------------------------------------------------------- smoothness


def slit_sums(angle: float, shape: str = "rect") -> tuple[np.ndarray, np.ndarray]:
    x = axis(64)
    widths = (3.0 + np.arange(15) / 7.0) * U  # 1/7-pixel steps
    sums = []
    for w in widths:
        if shape == "rect":
            el = Rect(width=w, height=20.3 * U, angle=angle, x=0.11 * U, y=-0.27 * U)
        else:
            el = Grating(count=3, period=9 * U, width=w, height=20.3 * U, angle=angle)
        sums.append(coverage(el, x, x).sum() * U * U)
    return widths, np.array(sums)


def test_slit_area_grows_linearly_with_width_when_axis_aligned():
    widths, sums = slit_sums(0.0)
    assert np.all(np.diff(sums) > 0)
    np.testing.assert_allclose(sums, widths * 20.3 * U, rtol=1e-12, atol=0)


@pytest.mark.parametrize("shape", ["rect", "grating"])
def test_slit_area_grows_strictly_when_rotated(shape):
    _, sums = slit_sums(0.45, shape)
    assert np.all(np.diff(sums) > 0)


def test_moving_a_circle_by_a_seventh_of_a_pixel_changes_no_pixel_by_much():
    # A hard mask would flip pixels 0 <-> 1. The half-plane coverage has slope at most
    # √2 per pixel (along the diagonal), so a 1/7-pixel move changes a pixel by ≤ √2/7.
    x = axis(60)
    prev = coverage(Circle(diameter=40 * U), x, x)
    for k in range(1, 8):
        cur = coverage(Circle(diameter=40 * U, x=k * U / 7), x, x)
        assert np.abs(cur - prev).max() <= math.sqrt(2) / 7 + 1e-9
        prev = cur


# --------------------------------------------------------------------- painting


def test_an_opaque_disk_over_a_larger_one_makes_the_annulus():
    d_out, d_in = 1e-3, 0.4e-3
    pitch = d_out / 80
    x = axis(90, pitch, 0.33 * pitch)
    painted = Aperture(elements=[Circle(diameter=d_out), Circle(diameter=d_in, transmission=0.0)])
    ring = Aperture(elements=[Annulus(diameter=d_out, inner_diameter=d_in)])
    a_painted = np.abs(transmittance(painted, x, x)).sum() * pitch**2
    a_ring = np.abs(transmittance(ring, x, x)).sum() * pitch**2
    assert a_painted == pytest.approx(a_ring, rel=1e-3)
    # Ring area π (D² − d²)/4 (standard geometry).
    assert a_ring == pytest.approx(math.pi * (d_out**2 - d_in**2) / 4, rel=1e-3)


def test_clear_background_with_an_opaque_wire_is_one_minus_the_slit():
    x = axis(50)
    wire = Rect(width=3.4 * U, height=1.0, transmission=0.0, x=0.2 * U)
    t = transmittance(Aperture(background="clear", elements=[wire]), x, x)
    np.testing.assert_allclose(t, 1.0 - coverage(wire, x, x), atol=1e-15)


def test_transmission_and_phase_are_applied_inside_and_at_the_border():
    x = axis(40)
    disk = Circle(diameter=25 * U, transmission=0.5, phase=1.0, x=0.3 * U)
    t = transmittance(Aperture(elements=[disk]), x, x)
    np.testing.assert_allclose(t, coverage(disk, x, x) * 0.5 * np.exp(1j), atol=1e-15)
    assert np.abs(t).max() == pytest.approx(0.5)


def test_later_elements_paint_over_earlier_ones_by_coverage():
    x = axis(30)
    first = Rect(width=20 * U, height=20 * U, transmission=0.8)
    second = Rect(width=7.5 * U, height=7.5 * U, x=0.3 * U, phase=math.pi / 2, transmission=0.6)
    t = transmittance(Aperture(elements=[first, second]), x, x)
    c1, c2 = coverage(first, x, x), coverage(second, x, x)
    expected = (c1 * 0.8) * (1 - c2) + c2 * 0.6 * np.exp(1j * math.pi / 2)
    np.testing.assert_allclose(t, expected, atol=1e-15)
    assert np.any((c2 > 0) & (c2 < 1))  # partly covered pixels are blended


def test_single_precision_output():
    x = axis(20)
    t = transmittance(Aperture(elements=[Circle(diameter=10 * U)]), x, x, dtype=np.complex64)
    assert t.dtype == np.complex64
    assert t.real.sum() * U * U == pytest.approx(math.pi * (10 * U) ** 2 / 4, rel=1e-3)


# ----------------------------------------------------------------------- images


def checkerboard() -> tuple[np.ndarray, str]:
    # Grey levels that 8 bits store exactly (51/255 and 204/255); row 0 = top.
    grey = np.array([[51, 204, 51, 204], [204, 51, 204, 51]] * 2) / 255.0
    grey[0, 0] = 102 / 255.0  # mark the top-left corner
    return grey, encode_png_data_url(grey)


def test_image_on_aligned_grid_reproduces_its_grey_levels_with_y_up():
    grey, data = checkerboard()
    x = axis(4, U, 0.5 * U)  # centres -1.5..1.5 px: one per image pixel
    el = Image(data=data, width=4 * U, height=4 * U)
    t = transmittance(Aperture(elements=[el]), x, x)
    # Row 0 of the picture is its top, i.e. the largest y (the last grid row).
    np.testing.assert_allclose(t.real, grey[::-1], atol=1e-12)
    assert t[-1, 0].real == pytest.approx(102 / 255.0)
    np.testing.assert_allclose(coverage(el, x, x), 1.0, atol=1e-12)


def test_image_transmission_and_phase_multiply_the_grey_level():
    grey, data = checkerboard()
    x = axis(4, U, 0.5 * U)
    el = Image(data=data, width=4 * U, height=4 * U)
    el.transmission, el.phase = 0.5, -0.7
    t = transmittance(Aperture(elements=[el]), x, x)
    np.testing.assert_allclose(t, 0.5 * np.exp(-0.7j) * grey[::-1], atol=1e-12)


@pytest.mark.parametrize("pitch", [0.37, 0.7, 1.3, 3.1])
def test_image_resampling_keeps_the_mean_transmission_when_misaligned(pitch):
    grey, data = checkerboard()
    p = pitch * U
    x, y = axis(40, p, 0.37 * U), axis(40, p, -0.21 * U)
    el = Image(data=data, width=4 * U, height=4 * U, x=0.13 * U)
    t = transmittance(Aperture(elements=[el]), x, y)
    # Box-overlap resampling is exact: ∑ t·dx·dy = mean grey × footprint area.
    assert t.real.sum() * p * p == pytest.approx(grey.mean() * 16 * U * U, rel=1e-12)


@pytest.mark.parametrize("angle", [0.3, 1.0])
def test_rotated_image_keeps_the_mean_transmission_approximately(angle):
    grey, data = checkerboard()
    for pitch in (0.7, 3.1):
        p = pitch * U
        x = axis(40, p, 0.37 * U)
        el = Image(data=data, width=4 * U, height=4 * U, angle=angle, x=0.13 * U)
        t = transmittance(Aperture(elements=[el]), x, x)
        assert t.real.sum() * p * p == pytest.approx(grey.mean() * 16 * U * U, rel=2e-3)
        assert coverage(el, x, x).sum() * p * p == pytest.approx(16 * U * U, rel=1e-12)


def test_image_quarter_turn_puts_the_left_of_the_picture_at_the_bottom():
    # A 1×2 picture, white left and black right; turned +90° its left (−u) lies at −y.
    data = encode_png_data_url(np.array([[1.0, 0.0]]))
    x = axis(2, U, 0.5 * U)  # centres -0.5, 0.5 px
    el = Image(data=data, width=2 * U, height=1 * U, angle=math.pi / 2)
    t = transmittance(Aperture(elements=[el]), np.array([0.0]), x, pitch=(U, U)).real
    np.testing.assert_allclose(t[:, 0], [1.0, 0.0], atol=1e-12)


@pytest.mark.parametrize("turns", [0, 1, 2, 3])
def test_image_at_quarter_turns_lands_where_the_rotation_puts_each_pixel(turns):
    # Expected value by mapping each grid centre back into the picture: rotate by
    # −angle about the element centre, then column = ⌊(u + W/2)/p⌋ and row from the
    # top = ⌊(H/2 − v)/p⌋. A 3×3 picture centred on (0.5, 0.5) px has its pixel
    # edges on the grid's pixel edges at every quarter turn.
    grey = np.arange(10, 100, 10).reshape(3, 3) / 255.0
    el = Image(
        data=encode_png_data_url(grey),
        width=3 * U,
        height=3 * U,
        angle=turns * math.pi / 2,
        x=0.5 * U,
        y=0.5 * U,
    )
    x = axis(6, U, 0.5 * U)  # centres -2.5 .. 2.5 px
    t = transmittance(Aperture(elements=[el]), x, x).real
    a = -turns * math.pi / 2
    expected = np.zeros((6, 6))
    for j, yc in enumerate(x - 0.5 * U):
        for i, xc in enumerate(x - 0.5 * U):
            u = math.cos(a) * xc - math.sin(a) * yc
            v = math.sin(a) * xc + math.cos(a) * yc
            col, row = math.floor((u + 1.5 * U) / U), math.floor((1.5 * U - v) / U)
            if 0 <= col < 3 and 0 <= row < 3:
                expected[j, i] = grey[row, col]
    np.testing.assert_allclose(t, expected, atol=1e-12)
    assert np.count_nonzero(expected) == 9


def test_bad_image_data_is_refused_with_a_message():
    el = Image(data="data:image/png;base64,AAAA", width=U, height=U)
    with pytest.raises(PngDataError, match="not a PNG"):
        transmittance(Aperture(elements=[el]), axis(4), axis(4))


# ------------------------------------------------------------------------- edge


def test_edge_covers_half_of_a_symmetric_window():
    x = symmetric_axis(21)
    cov = coverage(Edge(), x, x)
    # The edge passes through the centres of the middle column: 0.5 there.
    np.testing.assert_allclose(cov[:, 10], 0.5, atol=1e-15)
    assert np.all(cov[:, 11:] == 1.0) and np.all(cov[:, :10] == 0.0)
    assert cov.sum() == pytest.approx(cov.size / 2, rel=1e-14)


@pytest.mark.parametrize("angle", [0.7, 2.2, -1.0])
def test_rotated_edge_through_the_centre_covers_exactly_half(angle):
    # Point symmetry of the grid: c(p) + c(−p) = 1, so the total is half the window
    # and the centre pixel is 0.5 (common practice, no source).
    x = symmetric_axis(31)
    cov = coverage(Edge(angle=angle), x, x)
    assert cov.sum() == pytest.approx(cov.size / 2, rel=1e-12)
    assert cov[15, 15] == pytest.approx(0.5, abs=1e-12)
    np.testing.assert_allclose(cov + cov[::-1, ::-1], 1.0, atol=1e-12)


def test_rotated_edge_equals_an_exactly_clipped_large_rect():
    # Two independent exact methods: projected-pixel distribution and polygon clipping.
    x, y = axis(60), axis(40, 1.3 * U)
    a = 0.7
    e = coverage(Edge(angle=a, x=0.37 * U, y=0.2 * U), x, y)
    r = coverage(
        Rect(
            width=0.02,
            height=0.04,
            angle=a,
            x=0.37 * U + 0.01 * math.cos(a),
            y=0.2 * U + 0.01 * math.sin(a),
        ),
        x,
        y,
    )
    np.testing.assert_allclose(e, r, atol=1e-10)


# ----------------------------------------------------------------------- bounds


def test_bounds_of_rotated_elements():
    # Rotated box: half extents |cos|·w/2 + |sin|·h/2 and |sin|·w/2 + |cos|·h/2
    # (standard geometry).
    b = element_bounds(Rect(width=4.0, height=2.0, angle=math.pi / 2, x=1.0))
    np.testing.assert_allclose(b, (0.0, 2.0, -2.0, 2.0), atol=1e-15)
    b = element_bounds(Rect(width=4.0, height=2.0, angle=math.pi / 4))
    r = 3.0 / math.sqrt(2)
    np.testing.assert_allclose(b, (-r, r, -r, r), atol=1e-15)
    # Three openings 1 wide at period 2 span 5 along u.
    b = element_bounds(Grating(count=3, period=2.0, width=1.0, height=0.5, angle=math.pi / 2))
    np.testing.assert_allclose(b, (-0.25, 0.25, -2.5, 2.5), atol=1e-15)
    b = element_bounds(Polygon(vertices=[[1.0, 0.0], [2.0, 0.0], [1.0, 3.0]], angle=math.pi / 2))
    np.testing.assert_allclose(b, (-3.0, 0.0, 1.0, 2.0), atol=1e-15)
    b = element_bounds(Annulus(diameter=2.0, inner_diameter=1.0, x=1.0, y=-1.0, angle=0.4))
    assert b == (0.0, 2.0, -2.0, 0.0)


def test_bounds_of_the_edge():
    inf = math.inf
    assert element_bounds(Edge(x=0.1)) == (0.1, inf, -inf, inf)
    assert element_bounds(Edge(y=0.2, angle=math.pi / 2)) == (-inf, inf, 0.2, inf)
    assert element_bounds(Edge(x=0.1, angle=math.pi)) == (-inf, 0.1, -inf, inf)
    assert element_bounds(Edge(angle=0.3)) == (-inf, inf, -inf, inf)


@pytest.mark.parametrize(
    ("el", "slack"),
    [
        (Rect(width=30 * U, height=10 * U, angle=0.6, x=5 * U), 0.0),
        (l_shape(angle=1.3), 0.0),
        (Circle(diameter=21 * U, x=-13 * U), 0.0),
        (Edge(angle=math.pi / 2, y=4.5 * U), 0.0),
        # The box-filtered ramp of a rotated grating reaches at most one pixel further.
        (Grating(count=3, period=9 * U, width=4 * U, height=30 * U, angle=2.0, y=-7 * U), U),
    ],
    ids=lambda v: getattr(v, "shape", str(v)),
)
def test_coverage_vanishes_outside_the_bounds(el, slack):
    x = axis(120)
    x0, x1, y0, y1 = element_bounds(el)
    x0, x1, y0, y1 = x0 - slack, x1 + slack, y0 - slack, y1 + slack
    cov = coverage(el, x, x)
    out_x = (x + U / 2 <= x0) | (x - U / 2 >= x1)
    out_y = (x + U / 2 <= y0) | (x - U / 2 >= y1)
    assert out_x.any() or out_y.any()
    # Zero up to the rounding of the pixel coordinates themselves.
    assert np.all(cov[:, out_x] <= 1e-12) and np.all(cov[out_y, :] <= 1e-12)
    assert cov.sum() > 0


def test_aperture_bounds_is_the_union():
    assert aperture_bounds(Aperture()) is None
    ap = Aperture(elements=[Rect(width=2.0, height=1.0, x=1.0), Circle(diameter=1.0, y=-2.0)])
    assert aperture_bounds(ap) == (-0.5, 2.0, -2.5, 0.5)
    ap = Aperture(background="clear", elements=[Edge(x=0.5), Circle(diameter=1.0)])
    assert aperture_bounds(ap) == (-0.5, math.inf, -math.inf, math.inf)


# ----------------------------------------------------------------- feature size


def test_feature_sizes_by_hand():
    assert feature_size(Rect(width=3e-5, height=2e-3)) == 3e-5
    assert feature_size(Circle(diameter=1e-4)) == 1e-4
    assert feature_size(Annulus(diameter=1e-3, inner_diameter=8e-4)) == pytest.approx(1e-4)
    assert feature_size(Annulus(diameter=1e-3, inner_diameter=5e-5)) == 5e-5
    assert feature_size(Annulus(diameter=1e-3, inner_diameter=0.0)) == pytest.approx(5e-4)
    assert feature_size(Grating(count=5, period=1e-4, width=8e-5, height=1e-3)) == (
        pytest.approx(2e-5)
    )
    # With one opening the period is no feature.
    assert feature_size(Grating(count=1, period=1e-4, width=8e-5, height=1e-3)) == 8e-5
    assert feature_size(Edge()) == math.inf
    _, data = checkerboard()
    assert feature_size(Image(data=data, width=4e-4, height=2e-4)) == pytest.approx(5e-5)


def test_polygon_feature_size_sees_a_thin_sliver():
    # Edges are ~5 long but the triangle is only 0.1 high.
    sliver = Polygon(vertices=[[0.0, 0.0], [10e-3, 0.0], [5e-3, 0.1e-3]])
    assert feature_size(sliver) == pytest.approx(0.1e-3)
    assert feature_size(l_shape()) == pytest.approx(20 * U)


def test_smallest_feature_over_the_aperture():
    assert smallest_feature(Aperture()) == math.inf
    ap = Aperture(elements=[Circle(diameter=1e-3), Rect(width=2e-5, height=1e-3), Edge()])
    assert smallest_feature(ap) == 2e-5


# ------------------------------------------------------------------- bad input


def test_bad_axes_are_refused_with_a_message():
    el = Circle(diameter=5 * U)
    with pytest.raises(ValueError, match="single sample"):
        coverage(el, np.array([0.0]), axis(4))
    with pytest.raises(ValueError, match="uniformly spaced"):
        coverage(el, np.array([0.0, 1.0, 3.0]) * U, axis(4))
    with pytest.raises(ValueError, match="increase"):
        coverage(el, axis(4)[::-1], axis(4))
    with pytest.raises(ValueError, match="NaN"):
        coverage(el, np.array([0.0, np.nan]), axis(4))
    with pytest.raises(ValueError, match="disagrees"):
        coverage(el, axis(4), axis(4), pitch=(2 * U, U))
    with pytest.raises(ValueError, match="complex"):
        transmittance(Aperture(elements=[el]), axis(4), axis(4), dtype=np.float64)


def test_an_element_that_breaks_its_own_rules_is_refused():
    ring = Annulus(diameter=1e-3, inner_diameter=1e-3)
    with pytest.raises(ValueError, match="inner_diameter"):
        transmittance(Aperture(elements=[ring]), axis(8), axis(8))


def test_a_polygon_with_bad_vertices_is_refused_everywhere():
    bad = Polygon()
    bad.vertices = [[0.0, 0.0], [1e-3, 0.0]]
    for call in (
        lambda: coverage(bad, axis(8), axis(8)),
        lambda: element_bounds(bad),
        lambda: feature_size(bad),
        lambda: area(bad),
    ):
        with pytest.raises(ValueError, match="at least 3 vertices"):
            call()


# ----------------------------------------------------------- quadrature weights
#
# quadrature_transmittance returns weights T with Σ T g(s_i) h² = ∫ t g d²s + O(h⁴)
# for smooth g: the second-order (Euler–Maclaurin) midpoint terms of every
# pixel's covered part, moved onto the weights by summation by parts (Davis &
# Rabinowitz, Methods of Numerical Integration, 2nd ed., §2.9).


def fourier_sum(T: np.ndarray, x: np.ndarray, y: np.ndarray, f) -> complex:
    """Σ T exp(2πi f·s) dx dy over the pixel centres."""
    ex = np.exp(2j * np.pi * f[0] * x)
    ey = np.exp(2j * np.pi * f[1] * y)
    return complex(ey @ T @ ex) * (x[1] - x[0]) * (y[1] - y[0])


def box_transform(x0, x1, y0, y1, f) -> complex:
    # ∫∫ exp(2πi f·s) over a box: the sinc product (Goodman, Introduction to Fourier
    # Optics, 3rd ed., Table 2.1: the transform of rect is sinc).
    w, h = x1 - x0, y1 - y0
    if w <= 0 or h <= 0:
        return 0.0
    centre = np.exp(2j * np.pi * (f[0] * (x0 + x1) + f[1] * (y0 + y1)) / 2)
    return complex(w * h * np.sinc(f[0] * w) * np.sinc(f[1] * h) * centre)


def rect_transform(el: Rect, f) -> complex:
    c, s = math.cos(el.angle), math.sin(el.angle)
    fu, fv = f[0] * c + f[1] * s, -f[0] * s + f[1] * c  # frequencies in the rect's frame
    shift = np.exp(2j * np.pi * (f[0] * el.x + f[1] * el.y))
    return complex(el.width * el.height * np.sinc(fu * el.width) * np.sinc(fv * el.height) * shift)


def disk_transform(diameter: float, cx: float, cy: float, f) -> complex:
    # π r² · 2 J1(q)/q, q = 2π|f| r: the Airy pattern's amplitude (Goodman, 3rd ed.,
    # §4.4.2; scipy.special.j1).
    r = 0.5 * diameter
    q = 2 * np.pi * math.hypot(*f) * r
    shift = np.exp(2j * np.pi * (f[0] * cx + f[1] * cy))
    return complex(math.pi * r * r * 2 * special.j1(q) / q * shift)


def polygon_transform(verts, f) -> complex:
    # Divergence theorem: ∫_P e^{2πi f·s} = (2πi|f|²)⁻¹ Σ_edges (f × d) e^{2πi f·m} sinc(f·d),
    # d the edge vector, m its midpoint, counter-clockwise (common practice, no
    # source; checked against the sinc product of a square below).
    v = np.asarray(verts, dtype=float)
    d = np.roll(v, -1, axis=0) - v
    m = v + 0.5 * d
    fv = np.asarray(f, dtype=float)
    cross = fv[0] * d[:, 1] - fv[1] * d[:, 0]
    terms = cross * np.exp(2j * np.pi * (m @ fv)) * np.sinc(d @ fv)
    return complex(terms.sum() / (2j * np.pi * (fv @ fv)))


def test_polygon_transform_reference_matches_the_sinc_product_of_a_square():
    f = (3.1e3, -1.7e3)
    square = [[-2e-4, -1e-4], [3e-4, -1e-4], [3e-4, 2e-4], [-2e-4, 2e-4]]
    assert polygon_transform(square, f) == pytest.approx(
        box_transform(-2e-4, 3e-4, -1e-4, 2e-4, f), rel=1e-12
    )


def test_full_pixels_keep_their_value_and_a_pixel_aligned_rect_gets_the_1_22_1_filter():
    # Euler–Maclaurin end correction of the midpoint rule: [1, 22, 1]/24 per axis
    # across an edge on the pixel lines (Davis & Rabinowitz, 2nd ed., §2.9).
    x = axis(24)
    rect = Aperture(elements=[Rect(width=10 * U, height=6 * U, x=0.5 * U, y=0.5 * U)])
    T = quadrature_transmittance(rect, x, x)
    np.testing.assert_allclose(T, edge_corrected(transmittance(rect, x, x)), rtol=0, atol=1e-14)
    # Rows 10..15 (y = −2..3 px) and columns 8..17 are covered. Deep inside: 1; at the
    # corner pixel (10, 8): (23/24)²; just outside the left side: 1/24.
    assert T[12, 12] == pytest.approx(1.0, abs=1e-15)
    assert T[10, 8].real == pytest.approx((23 / 24) ** 2, abs=1e-15)
    assert T[12, 7].real == pytest.approx(1 / 24, abs=1e-15)
    # The same square as a polygon, by its exact moments, gets the same weights.
    half = [[-5, -3], [5, -3], [5, 3], [-5, 3]]
    square = Polygon(vertices=[[a * U, b * U] for a, b in half], x=0.5 * U, y=0.5 * U)
    P = quadrature_transmittance(Aperture(elements=[square]), x, x)
    np.testing.assert_allclose(P, T, rtol=0, atol=1e-12)


# Area moments ∫ 1, x, y, x², xy, y² of the shapes, by Green's theorem: for a polygon
# the standard vertex sums (common practice, no source), for a disk of radius R about
# (a, b): πR² (1, a, b, a² + R²/4, ab, b² + R²/4).
MONOMIALS = ("1", "x", "y", "xx", "xy", "yy")


def polygon_moments(verts) -> np.ndarray:
    v = np.asarray(verts, dtype=float)
    w = np.roll(v, -1, axis=0)
    x0, y0, x1, y1 = v[:, 0], v[:, 1], w[:, 0], w[:, 1]
    cross = x0 * y1 - x1 * y0
    return np.array(
        [
            cross.sum() / 2,
            ((x0 + x1) * cross).sum() / 6,
            ((y0 + y1) * cross).sum() / 6,
            ((x0 * x0 + x0 * x1 + x1 * x1) * cross).sum() / 12,
            ((x0 * y1 + 2 * x0 * y0 + 2 * x1 * y1 + x1 * y0) * cross).sum() / 24,
            ((y0 * y0 + y0 * y1 + y1 * y1) * cross).sum() / 12,
        ]
    )


def box_moments(x0, x1, y0, y1) -> np.ndarray:
    if x1 <= x0 or y1 <= y0:
        return np.zeros(6)
    return polygon_moments([[x0, y0], [x1, y0], [x1, y1], [x0, y1]])


def rotated_box_moments(w, h, angle, cx, cy) -> np.ndarray:
    c, s = math.cos(angle), math.sin(angle)
    box = np.array([[-w, -h], [w, -h], [w, h], [-w, h]]) / 2
    return polygon_moments(box @ np.array([[c, s], [-s, c]]) + [cx, cy])


def disk_moments(diameter, a, b) -> np.ndarray:
    r = diameter / 2
    return math.pi * r * r * np.array([1, a, b, a * a + r * r / 4, a * b, b * b + r * r / 4])


def image_cell_moments(el: Image) -> np.ndarray:
    grey = decode_png_data_url(el.data)[::-1]  # row 0 at the bottom
    rows, cols = grey.shape
    cw, ch = el.width / cols, el.height / rows
    x0, y0 = el.x - el.width / 2, el.y - el.height / 2
    return sum(
        grey[r, k] * box_moments(x0 + k * cw, x0 + (k + 1) * cw, y0 + r * ch, y0 + (r + 1) * ch)
        for r in range(rows)
        for k in range(cols)
    )


def grating_moments(el: Grating) -> np.ndarray:
    centres = (np.arange(el.count) - (el.count - 1) / 2) * el.period
    c, s = math.cos(el.angle), math.sin(el.angle)
    return sum(
        rotated_box_moments(el.width, el.height, el.angle, el.x + c * u, el.y + s * u)
        for u in centres
    )


def exactness_scenes():
    """(name, aperture, exact moments (6,)); no pixel holds edges of two elements."""
    p = U
    grey = np.array([[51, 204, 102], [255, 0, 153]]) / 255.0
    flat = np.full((3, 4), 204 / 255.0)
    tri_at = np.array([0.3 * p, 0.1 * p])
    tri = np.array([[-8, -6], [9, -3], [1, 9]]) * p + tri_at
    rect = Rect(width=13.3 * p, height=7.7 * p, x=0.31 * p, y=-0.2 * p)
    rot = Rect(width=13.3 * p, height=7.7 * p, x=0.31 * p, y=-0.2 * p, angle=0.37)
    grating = Grating(
        count=3, period=5.3 * p, width=2.2 * p, height=17.1 * p, x=0.17 * p, y=0.2 * p
    )
    tilted = Grating(count=3, period=5.3 * p, width=2.2 * p, height=17.1 * p, angle=-0.7)
    image = Image(data=encode_png_data_url(grey), width=11.3 * p, height=7.1 * p, x=0.4 * p)
    turned = Image(data=encode_png_data_url(flat), width=11.3 * p, height=7.1 * p, angle=0.5)
    outer = Circle(diameter=21.3 * p, x=0.2 * p, y=0.45 * p)
    hole = Circle(diameter=9.9 * p, x=0.2 * p, y=0.45 * p, transmission=0)
    big = Rect(width=30 * p, height=30 * p, x=0.1 * p)
    spot = Circle(diameter=9.1 * p, x=0.3 * p, y=-0.4 * p, transmission=0.3)
    # A phase rect over the middle opening, its sides in the gaps and past the ends.
    v = 0.5 * complex(math.cos(1.0), math.sin(1.0))
    x0, x1, y0, y1 = -3.0 * p, 3.3 * p, -9.5 * p, 9.9 * p
    cover = Rect(
        width=x1 - x0, height=y1 - y0, x=(x0 + x1) / 2, y=(y0 + y1) / 2, transmission=0.5, phase=1
    )
    middle = rotated_box_moments(2.2 * p, 17.1 * p, 0.0, 0.17 * p, 0.2 * p)
    ring = disk_moments(21.3 * p, 0.2 * p, 0.45 * p) - disk_moments(9.9 * p, 0.2 * p, 0.45 * p)
    one = lambda el: Aperture(elements=[el])  # noqa: E731
    return [
        ("rect", one(rect), box_moments(-6.34 * p, 6.96 * p, -4.05 * p, 3.65 * p)),
        (
            "rotated rect",
            one(rot),
            rotated_box_moments(13.3 * p, 7.7 * p, 0.37, 0.31 * p, -0.2 * p),
        ),
        (
            "polygon",
            one(Polygon(vertices=(tri - [0.3 * p, 0.1 * p]).tolist(), x=0.3 * p, y=0.1 * p)),
            polygon_moments(tri),
        ),
        ("grating", one(grating), grating_moments(grating)),
        ("rotated grating", one(tilted), grating_moments(tilted)),
        (
            "circle",
            one(Circle(diameter=17.3 * p, x=0.31 * p, y=-0.17 * p)),
            disk_moments(17.3 * p, 0.31 * p, -0.17 * p),
        ),
        (
            "sub-pixel disk",
            one(Circle(diameter=0.7 * p, x=0.31 * p, y=-0.17 * p)),
            disk_moments(0.7 * p, 0.31 * p, -0.17 * p),
        ),
        (
            "annulus",
            one(Annulus(diameter=21.3 * p, inner_diameter=9.9 * p, x=0.2 * p, y=0.45 * p)),
            ring,
        ),
        ("image", one(image), image_cell_moments(image)),
        (
            "turned uniform image",
            one(turned),
            204 / 255.0 * rotated_box_moments(11.3 * p, 7.1 * p, 0.5, 0.0, 0.0),
        ),
        ("ring from two disks", Aperture(elements=[outer, hole]), ring),
        (
            "disk over a rect",
            Aperture(elements=[big, spot]),
            box_moments(-14.9 * p, 15.1 * p, -15 * p, 15 * p)
            - 0.7 * disk_moments(9.1 * p, 0.3 * p, -0.4 * p),
        ),
        (
            "rect over a grating",
            Aperture(elements=[grating, cover]),
            grating_moments(grating) - middle + v * box_moments(x0, x1, y0, y1),
        ),
    ]


@pytest.mark.parametrize("index", range(13))
def test_weights_integrate_every_quadratic_exactly(index):
    # With exact moments the second-order expansion of each pixel, the central
    # differences and the summation by parts are all exact for g of degree ≤ 2, so the
    # rule's degree of exactness is 2 (Davis & Rabinowitz, 2nd ed., §2.9 and the
    # degree of precision of ch. 2): Σ T g h² = ∫ t g for g = 1, x, y, x², xy, y².
    # The plain coverage errs at O(h²) relative.
    name, ap, exact = exactness_scenes()[index]
    x = axis(48)
    X, Y = np.meshgrid(x, x)
    g = {"1": np.ones_like(X), "x": X, "y": Y, "xx": X * X, "xy": X * Y, "yy": Y * Y}
    scale = abs(exact[0]) * (1e-4) ** np.array([0, 1, 1, 2, 2, 2])  # shapes are ~1e-4 m
    T = quadrature_transmittance(ap, x, x)
    t = transmittance(ap, x, x)
    for k, mono in enumerate(MONOMIALS):
        got = (T * g[mono]).sum() * U * U
        assert abs(got - exact[k]) < 1e-12 * scale[k], (name, mono)
    plain_worst = max(
        abs((t * g[m]).sum() * U * U - exact[k]) / scale[k] for k, m in enumerate(MONOMIALS)
    )
    assert plain_worst > 1e-5, name  # the plain coverage is not exact


def shapes_inside(pitch: float) -> list:
    """One element of every kind, off the pixel lines, well inside a 40-pixel window."""
    p = pitch
    grey = np.array([[51, 204, 102], [255, 0, 153]]) / 255.0
    return [
        Rect(width=13.3 * p, height=7.7 * p, x=0.31 * p, y=-0.27 * p),
        Rect(width=13.3 * p, height=7.7 * p, x=0.31 * p, angle=0.41),
        Grating(count=3, period=5.3 * p, width=2.2 * p, height=17.1 * p, x=0.17 * p),
        Grating(count=3, period=5.3 * p, width=2.2 * p, height=17.1 * p, angle=-0.7),
        Circle(diameter=17.3 * p, x=0.31 * p, y=-0.17 * p),
        Annulus(diameter=21.3 * p, inner_diameter=9.9 * p, x=0.2 * p, y=0.45 * p),
        Polygon(vertices=[[-8 * p, -6 * p], [9 * p, -3 * p], [1 * p, 9 * p]], x=0.3 * p),
        Image(data=encode_png_data_url(grey), width=11.3 * p, height=7.1 * p, x=0.4 * p),
        Image(data=encode_png_data_url(grey), width=11.3 * p, height=7.1 * p, angle=0.5),
    ]


@pytest.mark.parametrize("index", range(9))
def test_total_weight_equals_the_plain_painted_transmission(index):
    # The stencils move weight between neighbours and never create any (they are
    # differences); with an empty margin the totals agree to rounding (common
    # practice, no source). The area of the shapes is standard geometry; an image
    # carries its grey levels, so its total is the plain painted one.
    x = axis(40)
    el = shapes_inside(U)[index]
    ap = Aperture(elements=[el])
    total = quadrature_transmittance(ap, x, x).sum()
    assert abs(total.imag) < 1e-12
    if isinstance(el, Image):
        assert total.real == pytest.approx(transmittance(ap, x, x).sum().real, rel=1e-12)
    else:
        assert total.real == pytest.approx(area(el) / U**2, rel=1e-12)


def fourier_errors(make, exact, coarse: float, trials) -> dict:
    """RMS relative error of the Fourier sums over ``trials`` at pitch ``coarse`` and half of it.

    Each trial is a sub-pixel offset (in pixels of the pitch in use, so that both
    grids see the edges at the same phases: a single case's h⁴ term depends on
    that phase) and a direction; |f| = 0.25 / coarse, so |f| h is 0.25, then 0.125.
    """
    out = {}
    x0, x1, y0, y1 = element_bounds(make(np.zeros(2)))
    reach = max(abs(x0), abs(x1), abs(y0), abs(y1))
    for name, pitch in (("coarse", coarse), ("fine", coarse / 2)):
        quad, plain = [], []
        x = axis(2 * math.ceil(reach / pitch) + 8, pitch)  # ≥ 2 empty pixels around
        for offset, direction in trials:
            f = (0.25 / coarse * math.cos(direction), 0.25 / coarse * math.sin(direction))
            el = make(offset * pitch)
            ap = Aperture(elements=[el])
            ref = exact(el, f)
            scale = abs(area(el))
            quad.append(abs(fourier_sum(quadrature_transmittance(ap, x, x), x, x, f) - ref))
            plain.append(abs(fourier_sum(transmittance(ap, x, x), x, x, f) - ref))
        out[name] = float(np.sqrt(np.mean(np.square(quad)))) / scale
        out[name + "_plain"] = float(np.sqrt(np.mean(np.square(plain)))) / scale
    return out


def random_trials(seed: int, count: int = 12):
    rng = np.random.default_rng(seed)
    return [(rng.uniform(-0.5, 0.5, 2), rng.uniform(0, 2 * np.pi)) for _ in range(count)]


QUAD_DIAMETER = 1e-3  # m; shapes of this size, 40 pixels across at the coarse pitch
QUAD_PITCH = QUAD_DIAMETER / 40
IMAGE_GREY = np.array([[51, 204, 102, 0], [255, 0, 153, 204], [102, 51, 255, 153]]) / 255.0


def image_transform(el: Image, f) -> complex:
    # A piecewise-constant grey image is a sum of boxes, each a sinc product.
    grey = decode_png_data_url(el.data)[::-1]  # row 0 at the bottom
    rows, cols = grey.shape
    cw, ch = el.width / cols, el.height / rows
    x0, y0 = el.x - el.width / 2, el.y - el.height / 2
    return sum(
        grey[r, k]
        * box_transform(x0 + k * cw, x0 + (k + 1) * cw, y0 + r * ch, y0 + (r + 1) * ch, f)
        for r in range(rows)
        for k in range(cols)
    )


QUAD_CASES = {
    # name: (element from an offset (m), exact transform, least error ratio on halving)
    "rect": (
        lambda o: Rect(width=1e-3, height=7e-4, x=o[0], y=o[1]),
        rect_transform,
        10.0,
    ),
    "rotated rect": (
        lambda o: Rect(width=1e-3, height=7e-4, x=o[0], y=o[1], angle=0.37),
        rect_transform,
        10.0,
    ),
    # Drawn as a polygon: the general 2-D moments, with edges at one phase all along
    # (where the second-moment terms do not average out along the boundary).
    "rect as polygon": (
        lambda o: Polygon(
            vertices=[[-5e-4, -3.5e-4], [5e-4, -3.5e-4], [5e-4, 3.5e-4], [-5e-4, 3.5e-4]],
            x=o[0],
            y=o[1],
        ),
        lambda el, f: box_transform(el.x - 5e-4, el.x + 5e-4, el.y - 3.5e-4, el.y + 3.5e-4, f),
        10.0,
    ),
    "grating": (
        lambda o: Grating(count=4, period=2.3e-4, width=9.1e-5, height=8e-4, x=o[0], y=o[1]),
        lambda el, f: sum(
            box_transform(
                el.x + c - el.width / 2,
                el.x + c + el.width / 2,
                el.y - el.height / 2,
                el.y + el.height / 2,
                f,
            )
            for c in (np.arange(el.count) - (el.count - 1) / 2) * el.period
        ),
        10.0,
    ),
    "circle": (
        lambda o: Circle(diameter=1e-3, x=o[0], y=o[1]),
        lambda el, f: disk_transform(el.diameter, el.x, el.y, f),
        6.0,
    ),
    "annulus": (
        lambda o: Annulus(diameter=1e-3, inner_diameter=4.1e-4, x=o[0], y=o[1]),
        lambda el, f: (
            disk_transform(el.diameter, el.x, el.y, f)
            - disk_transform(el.inner_diameter, el.x, el.y, f)
        ),
        6.0,
    ),
    "polygon": (
        lambda o: Polygon(
            vertices=[[-4e-4, -3e-4], [5e-4, -1e-4], [2e-4, 4.5e-4], [-3e-4, 2e-4]],
            x=o[0],
            y=o[1],
        ),
        lambda el, f: polygon_transform(np.asarray(el.vertices) + np.array([el.x, el.y]), f),
        6.0,
    ),
    "image": (
        lambda o: Image(
            data=encode_png_data_url(IMAGE_GREY), width=9e-4, height=7e-4, x=o[0], y=o[1]
        ),
        image_transform,
        6.0,
    ),
}


@pytest.mark.parametrize("name", list(QUAD_CASES))
def test_fourier_sums_of_shapes_off_the_grid_converge_at_fourth_order(name):
    # O(h⁴): halving the pitch divides the error by ~16 (Davis & Rabinowitz, 2nd ed.,
    # §2.9, the midpoint rule with its second-order term); the plain area-weighted
    # coverage converges at O(h²) only. Exact transforms: see the helpers above.
    make, exact, least_ratio = QUAD_CASES[name]
    err = fourier_errors(make, exact, QUAD_PITCH, random_trials(7))
    assert err["coarse"] / err["fine"] >= least_ratio
    assert err["coarse"] < err["coarse_plain"]
    assert err["fine"] < 0.2 * err["fine_plain"]


def on_axis_fresnel_error(weights: str, zones: int, across: int, offset=(0.0, 0.0)) -> float:
    wavelength, diameter = 632.8e-9, 1e-3
    a = diameter / 2
    z = a * a / (zones * wavelength)  # `zones` open Fresnel zones: N = a²/(λz)
    pitch = diameter / across
    x = (np.arange(across + 8) - (across + 8) / 2 + 0.5) * pitch  # 4 empty pixels each side
    ox, oy = offset[0] * pitch, offset[1] * pitch
    ap = Aperture(elements=[Circle(diameter=diameter, x=ox, y=oy)])
    make = quadrature_transmittance if weights == "quadrature" else transmittance
    u = make(ap, x, x, pitch=(pitch, pitch))
    field = propagators.fresnel_impulse_response(
        u, x, x, wavelength, z, np.array([ox]), np.array([oy]), pitch=(pitch, pitch)
    )
    # Paraxial on-axis irradiance 4 I0 sin²(πN/2) (Goodman, 3rd ed., §4.5.1; Hecht,
    # 5th ed., §10.3.3), as compute.analytic.circle_on_axis(exact=False).
    expected = analytic.circle_on_axis(z, diameter, wavelength, 1.0, exact=False)
    return float(abs(field[0, 0]) ** 2 / expected - 1.0)


@pytest.mark.parametrize(("zones", "across"), [(3, 66), (7, 130)])
def test_on_axis_fresnel_irradiance_of_a_coarse_circle_is_within_0_3_percent(zones, across):
    for offset in ((0.0, 0.0), (0.37, -0.21)):
        assert abs(on_axis_fresnel_error("quadrature", zones, across, offset)) < 3e-3
    # The plain coverage is off by more than 1 % on the same grid.
    assert abs(on_axis_fresnel_error("plain", zones, across)) > 1e-2


def test_rect_fresnel_irradiance_converges_at_fourth_order():
    # Fresnel integrals of a rectangle (Goodman, 3rd ed., §4.5.1), as
    # compute.analytic.rect_fresnel; about three open zones across the width.
    wavelength, w, h = 632.8e-9, 6e-4, 4e-4
    z = (w / 2) ** 2 / (3 * wavelength)
    errors = []
    for across in (40, 80):
        pitch = w / across
        x = axis(int(1.4 * across), pitch)
        ox, oy = 0.31 * pitch, -0.27 * pitch
        ap = Aperture(elements=[Rect(width=w, height=h, x=ox, y=oy)])
        xs, ys = np.array([0.0, 0.1 * w, 0.3 * w]), np.array([0.0, 0.15 * h])
        expected = analytic.rect_fresnel(xs[None, :], ys[:, None], w, h, wavelength, z, 1.0)
        u = quadrature_transmittance(ap, x, x)
        field = propagators.fresnel_impulse_response(u, x, x, wavelength, z, xs + ox, ys + oy)
        errors.append(np.abs(np.abs(field) ** 2 / expected - 1).max())
    assert errors[1] < 1e-3
    assert errors[0] / errors[1] > 8


def test_weights_and_the_fresnel_value_change_smoothly_with_the_diameter():
    # A circle growing in tenths of a pixel: the total stays the exact area (standard
    # geometry) and the on-axis irradiance follows the paraxial curve (Goodman, 3rd
    # ed., §4.5.1) with an error that drifts, never jumps.
    wavelength, d0 = 632.8e-9, 1e-3
    pitch = d0 / 66
    x = (np.arange(80) - 40 + 0.37) * pitch
    z = (d0 / 2) ** 2 / (3 * wavelength)
    centre = (0.21 * pitch, -0.13 * pitch)
    errors = []
    for d in d0 + np.arange(21) * 0.1 * pitch:
        ap = Aperture(elements=[Circle(diameter=d, x=centre[0], y=centre[1])])
        T = quadrature_transmittance(ap, x, x)
        assert T.sum().real * pitch**2 == pytest.approx(math.pi * d * d / 4, rel=1e-12)
        field = propagators.fresnel_impulse_response(
            T, x, x, wavelength, z, np.array([centre[0]]), np.array([centre[1]])
        )
        expected = analytic.circle_on_axis(z, d, wavelength, 1.0, exact=False)
        errors.append(abs(field[0, 0]) ** 2 / expected - 1)
    errors = np.array(errors)
    assert np.abs(errors).max() < 3e-3
    assert np.abs(np.diff(errors)).max() < 5e-5  # the error moves by < 0.005 % a step


def test_power_transmittance_sums_to_the_exact_area():
    # Areas by standard geometry; the power through the aperture is ∫ |t|² (common
    # practice, no source), here area times |v|².
    x = axis(40)
    for el, v2 in (
        (Rect(width=13.3 * U, height=7.7 * U, x=0.31 * U, y=-0.27 * U, transmission=0.5), 0.25),
        (Circle(diameter=17.3 * U, x=0.31 * U, y=-0.17 * U), 1.0),
        (Rect(width=13.3 * U, height=7.7 * U, angle=0.41, transmission=0.8, phase=1.0), 0.64),
    ):
        ap = Aperture(elements=[el])
        p = power_transmittance(ap, x, x)
        assert p.dtype == np.float64
        assert p.sum() * U * U == pytest.approx(v2 * area(el), rel=1e-9)
        # |mean t|² < mean |t|² on partly covered pixels: the squared transmittance
        # underestimates the power.
        assert (np.abs(transmittance(ap, x, x)) ** 2).sum() < p.sum() * (1 - 1e-4)


def test_power_transmittance_of_an_image_carries_its_squared_grey_levels():
    # Image pixel on grid pixel: p = grey² (an 8-bit grey level g/255).
    grey = np.array([[51, 204], [102, 255]]) / 255.0
    el = Image(data=encode_png_data_url(grey), width=2 * U, height=2 * U, x=0.5 * U, y=0.5 * U)
    p = power_transmittance(Aperture(elements=[el]), axis(6), axis(6))
    np.testing.assert_allclose(p[3:5, 3:5], (grey**2)[::-1], atol=1e-12)
    assert p.sum() == pytest.approx((grey**2).sum(), rel=1e-12)


# ---------------------------------------------------- layered elements


def test_painting_over_a_uniform_region_adds_the_element_weights_times_the_step():
    # Over a uniform t the weights of t + (v − t)·χ are linear in the moments of χ
    # (common practice, no source): the same whether the uniform value comes from
    # the background or from an earlier element, even where the raster cuts the disk.
    x = axis(40)
    big = Rect(width=100 * U, height=100 * U)  # covers the whole raster: t = 1 under it
    disk = Circle(diameter=30 * U, x=14.2 * U, y=0.3 * U, transmission=0.3, phase=0.7)
    tri = Polygon(vertices=[[-8 * U, -6 * U], [9 * U, -3 * U], [1 * U, 9 * U]], angle=0.2)
    for el in (disk, tri):
        layered = quadrature_transmittance(Aperture(elements=[big, el]), x, x)
        below = quadrature_transmittance(Aperture(elements=[big]), x, x)
        alone = quadrature_transmittance(Aperture(background="clear", elements=[el]), x, x)
        np.testing.assert_allclose(layered - below, alone - 1.0, rtol=0, atol=1e-13)


@pytest.mark.parametrize("cover_kind", ["rect", "circle", "polygon"])
def test_an_element_hidden_under_a_later_one_leaves_no_trace(cover_kind):
    # Painting replaces what lies below (common practice, no source), so the weights
    # must not keep the edges of a fully hidden grating, even 1.5 pixels from the
    # covering edge.
    x = axis(48)
    grating = Grating(count=3, period=4.3 * U, width=1.7 * U, height=9.1 * U, x=0.23 * U)
    hidden = Polygon(vertices=[[-5 * U, -4 * U], [6 * U, -3 * U], [0.2 * U, 5.1 * U]], angle=0.3)
    value = {"transmission": 0.6, "phase": 0.4}
    cover = {
        "rect": Rect(width=14.6 * U, height=15.3 * U, x=0.41 * U, y=0.1 * U, **value),
        "circle": Circle(diameter=17.9 * U, x=0.3 * U, y=-0.2 * U, **value),
        "polygon": Polygon(
            vertices=[[-9 * U, -9 * U], [9.5 * U, -8 * U], [8 * U, 9 * U], [-8.7 * U, 8.1 * U]],
            **value,
        ),
    }[cover_kind]
    alone = quadrature_transmittance(Aperture(elements=[cover]), x, x)
    for below in (grating, hidden):
        layered = quadrature_transmittance(Aperture(elements=[below, cover]), x, x)
        np.testing.assert_allclose(layered, alone, rtol=0, atol=1e-12)


def test_partly_hidden_grating_converges_at_fourth_order():
    # A grating with a phase rect painted over its middle: the exact transform is
    # the openings' boxes, minus their parts under the rect, plus v times the rect
    # (boxes, sinc products). Halving the pitch divides the error by ~16 (Davis &
    # Rabinowitz, 2nd ed., §2.9).
    L = QUAD_DIAMETER
    v = 0.5 * complex(math.cos(math.pi / 3), math.sin(math.pi / 3))
    count, period, width, height = 7, 0.13 * L, 0.061 * L, 0.83 * L
    errs = {}
    for pitch in (QUAD_PITCH, QUAD_PITCH / 2):
        x = axis(int(1.2 * L / pitch) + 12, pitch)
        sq = []
        for offset, direction in random_trials(3):
            ox, oy = offset * QUAD_PITCH
            f = (0.2 / QUAD_PITCH * math.cos(direction), 0.2 / QUAD_PITCH * math.sin(direction))
            x0, x1, y0, y1 = -0.27 * L + 0.3 * ox, 0.20 * L, -0.21 * L, 0.26 * L + oy
            grating = Grating(count=count, period=period, width=width, height=height, x=ox, y=oy)
            cover = Rect(
                width=x1 - x0,
                height=y1 - y0,
                x=(x0 + x1) / 2,
                y=(y0 + y1) / 2,
                transmission=0.5,
                phase=math.pi / 3,
            )
            centres = (np.arange(count) - (count - 1) / 2) * period + ox
            gy0, gy1 = oy - height / 2, oy + height / 2
            exact = v * box_transform(x0, x1, y0, y1, f)
            for c in centres:
                gx0, gx1 = c - width / 2, c + width / 2
                exact += box_transform(gx0, gx1, gy0, gy1, f)
                exact -= box_transform(max(gx0, x0), min(gx1, x1), max(gy0, y0), min(gy1, y1), f)
            T = quadrature_transmittance(Aperture(elements=[grating, cover]), x, x)
            sq.append(abs(fourier_sum(T, x, x, f) - exact) ** 2)
        errs[pitch] = math.sqrt(np.mean(sq)) / L**2
    assert errs[QUAD_PITCH] / errs[QUAD_PITCH / 2] > 8


# ------------------------------------------------------- other quadrature checks


def test_rotated_edge_weights_equal_those_of_a_large_rotated_rect():
    # Inside the raster a half-plane and a rect whose other sides lie far outside
    # are the same set (standard geometry).
    x = axis(32)
    angle = 0.6
    c, s = math.cos(angle), math.sin(angle)
    edge = Edge(x=0.3 * U, y=-0.2 * U, angle=angle)
    rect = Rect(
        width=400 * U,
        height=800 * U,
        angle=angle,
        x=0.3 * U + 200 * U * c,
        y=-0.2 * U + 200 * U * s,
    )
    np.testing.assert_allclose(
        quadrature_transmittance(Aperture(elements=[edge]), x, x),
        quadrature_transmittance(Aperture(elements=[rect]), x, x),
        rtol=0,
        atol=1e-12,
    )


def test_rotated_grating_beyond_the_piece_budget_falls_back_to_the_filtered_coverage(
    monkeypatch,
):
    # A rotated grating whose edges would cut the grid into too many pieces keeps its
    # box-filtered coverage, with the moments of uniform pixels: the [1, 22, 1]/24
    # filter along each axis (Davis & Rabinowitz, 2nd ed., §2.9). A tiny budget
    # forces that path here.
    monkeypatch.setattr(apertures_module, "_MAX_PIECES", 10)
    x = axis(24)
    g = Grating(count=5, period=3.3 * U, width=1.1 * U, height=10 * U, angle=0.3)
    ap = Aperture(elements=[g])
    expected = edge_corrected(coverage(g, x, x))
    np.testing.assert_allclose(quadrature_transmittance(ap, x, x), expected, rtol=0, atol=1e-12)


def test_rotated_grating_with_100000_openings_matches_one_cut_to_what_the_grid_shows():
    # With an even count the openings sit at half-periods from the centre, so 30 and
    # 100 000 openings coincide over the raster (the outer ones of the 30 already lie
    # past it; standard geometry). Openings wholly beside the window are skipped, so
    # the vast grating costs what the small one does and gets the same exact weights.
    x = axis(40)
    common = {"period": 4.1 * U, "width": 1.3 * U, "height": 12 * U, "angle": 0.3, "x": 0.2 * U}
    vast = Aperture(elements=[Grating(count=100_000, **common)])
    small = Aperture(elements=[Grating(count=30, **common)])
    T = quadrature_transmittance(vast, x, x)
    np.testing.assert_allclose(T, quadrature_transmittance(small, x, x), rtol=0, atol=1e-12)
    assert T.real.max() > 0.9 and T.real.min() < 0.0  # real openings and real edge terms


def test_quadrature_weights_in_single_precision():
    x = axis(40)
    ap = Aperture(elements=[Circle(diameter=17.3 * U, x=0.31 * U), Rect(width=3 * U, height=3 * U)])
    single = quadrature_transmittance(ap, x, x, dtype=np.complex64)
    assert single.dtype == np.complex64
    np.testing.assert_allclose(single, quadrature_transmittance(ap, x, x), rtol=0, atol=1e-6)


def test_quadrature_and_power_refuse_bad_input_with_a_message():
    ap = Aperture(elements=[Circle(diameter=5 * U)])
    with pytest.raises(ValueError, match="complex"):
        quadrature_transmittance(ap, axis(8), axis(8), dtype=np.float64)
    with pytest.raises(ValueError, match="increase"):
        power_transmittance(ap, axis(8)[::-1], axis(8))
    with pytest.raises(ValueError, match="single sample"):
        quadrature_transmittance(ap, np.array([0.0]), axis(8))
    ring = Annulus(diameter=1e-3, inner_diameter=1e-3)
    for call in (quadrature_transmittance, power_transmittance):
        with pytest.raises(ValueError, match="inner_diameter"):
            call(Aperture(elements=[ring]), axis(8), axis(8))
