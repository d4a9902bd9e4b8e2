"""Rasterising aperture elements: exact and area-weighted coverage, painting, bounds.

Convention checked throughout: the coverage of a pixel is the fraction of its
square covered by the element, and painting is ``t·(1 − c) + c·v`` (common
practice, no source). Overlaps and areas are standard geometry, worked by hand in
the comments beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from compute.apertures import (
    aperture_bounds,
    area,
    coverage,
    element_bounds,
    feature_size,
    smallest_feature,
    transmittance,
)
from compute.grids import centred_axis
from compute.model import Annulus, Aperture, Circle, Edge, Grating, Image, Polygon, Rect
from compute.pngdata import PngDataError, encode_png_data_url

U = 1e-5  # one pixel in most tests, m


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
