"""The map and aperture figures without a browser: frame, ranges, aspect, digits.

What the browser shows of them is checked in tests/browser/test_map_frame.py; here
the figures' own models are read. Equal length per pixel in x and y is common
practice for an image of a plane (no source).
"""

from __future__ import annotations

import numpy as np
import pytest

from server import cutplot, mapplot


def _axes(n: int, width: float, centre: float = 0.0) -> np.ndarray:
    step = width / n
    return centre - width / 2 + (np.arange(n) + 0.5) * step


@pytest.mark.parametrize(
    ("w", "h"), [(0.02, 0.006), (0.06, 0.012), (4e-4, 4e-4), (1e-3, 3e-4), (0.02, 0.003)]
)
def test_the_frame_shows_the_window_at_one_to_one(w, h):
    fw, fh = mapplot.frame_size(w, h)
    assert fw <= mapplot.MAP_FRAME[0] and fh <= mapplot.MAP_FRAME[1]
    assert max(fw / mapplot.MAP_FRAME[0], fh / mapplot.MAP_FRAME[1]) == pytest.approx(1.0)
    # Length per screen pixel in x and y agree to the rounding of one pixel.
    assert (w / fw) == pytest.approx(h / fh, rel=1.0 / min(fw, fh))


def test_a_very_long_window_keeps_a_visible_strip():
    fw, fh = mapplot.frame_size(1.0, 1e-3)
    assert (fw, fh) == (mapplot.MAP_FRAME[0], mapplot.MIN_SIDE)


def test_the_map_opens_on_the_window_and_keeps_a_zoom_until_asked():
    m = mapplot.MapPlot()
    x, y = _axes(480, 0.02), _axes(144, 0.006)
    z = np.outer(np.hanning(144), np.hanning(480))
    m.show(x, y, z)
    f = m.figure
    assert (f.x_range.start, f.x_range.end) == pytest.approx((-10.0, 10.0))
    assert (f.y_range.start, f.y_range.end) == pytest.approx((-3.0, 3.0))
    assert (f.x_range.reset_start, f.y_range.reset_end) == pytest.approx((-10.0, 3.0))
    assert (f.frame_width, f.frame_height) == mapplot.frame_size(20.0, 6.0)
    data = m.source.data
    assert data["x"][0] == pytest.approx(-10.0) and data["dw"][0] == pytest.approx(20.0)
    assert data["image"][0].dtype == np.float32 and data["image"][0].shape == (144, 480)
    # A zoom the user chose stays through a new result on the same window ...
    f.x_range.start, f.x_range.end = -2.0, 2.0
    m.show(x, y, 2 * z)
    assert (f.x_range.start, f.x_range.end) == (-2.0, 2.0)
    # ... and goes when asked (a load, an element added or deleted) or the window moves.
    m.show(x, y, z, reframe=True)
    assert (f.x_range.start, f.x_range.end) == pytest.approx((-10.0, 10.0))
    f.x_range.start = -1.0
    m.show(_axes(400, 4e-4), _axes(400, 4e-4), np.ones((400, 400)))
    assert (f.x_range.start, f.x_range.end) == pytest.approx((-0.2, 0.2))
    assert f.frame_width == f.frame_height


def test_the_previews_have_ranges_of_their_own():
    m, a = mapplot.MapPlot(), mapplot.ApertureViews()
    ax = _axes(256, 1e-3)
    a.show(ax, ax, np.ones((256, 256), complex))
    m.show(_axes(480, 0.02), _axes(144, 0.006), np.ones((144, 480)))
    for fig in (a.amplitude, a.phase):
        assert fig.x_range is not m.figure.x_range and fig.y_range is not m.figure.y_range
        assert (fig.x_range.start, fig.x_range.end) == pytest.approx((-0.5, 0.5))
    assert a.amplitude.x_range is not a.phase.x_range


def test_log_scale_floors_six_decades_and_switches_the_colour_mapper():
    m = mapplot.MapPlot(scale="log")
    z = np.zeros((4, 4))
    z[1, 1] = 10.0
    m.show(_axes(4, 1e-3), _axes(4, 1e-3), z)
    shown = m.source.data["image"][0]
    assert shown.min() == pytest.approx(1e-5, rel=1e-6) and m.log_mapper.high == 10.0
    assert m.image.glyph.color_mapper is m.log_mapper
    m.set_scale("linear")
    assert m.image.glyph.color_mapper is m.linear_mapper is m.colour_bar.color_mapper


@pytest.mark.parametrize(
    ("value", "step", "text"),
    [
        (0.02083, 0.04167, "0.02"),
        (0.0, 0.04167, "0"),
        (-0.0004, 0.001, "0"),
        (1.2345, 0.01, "1.23"),
    ],
)
def test_cut_titles_give_a_pixel_s_digits(value, step, text):
    assert cutplot.position_text(value, step) == text


def test_a_cut_title_at_the_window_centre_reads_zero():
    x = _axes(480, 0.02)
    cols = cutplot.cut_columns(
        {
            "coords": x,
            "values": np.ones_like(x),
            "axis": "x",
            "at": 0.0,
            "step": 0.006 / 144,
            "marker": x[240],
        },
        scale="linear",
    )
    assert cols["title"] == "Cut along x at y = 0 mm"


def test_hover_decimals_follow_the_pixel():
    assert mapplot.axis_decimals(0.0417) == 3  # a 20 mm window of 480 pixels
    assert mapplot.axis_decimals(0.001) == 4
    assert mapplot.axis_decimals(2.0) == 1


def test_a_click_and_a_quick_second_click_both_reach_the_map_callback():
    from bokeh import events

    taps: list[tuple[float, float]] = []
    m = mapplot.MapPlot(on_tap=lambda x, y: taps.append((x, y)))
    # Bokeh's own dispatch, as when the browser sends the events.
    m.figure._trigger_event(events.Tap(m.figure, x=-1.5, y=0.25))
    m.figure._trigger_event(events.DoubleTap(m.figure, x=2.0, y=-0.5))
    assert taps == [(-1.5, 0.25), (2.0, -0.5)]
