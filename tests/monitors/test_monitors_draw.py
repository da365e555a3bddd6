"""Drawing: panels have the asked size, show the numbers where they belong, reuse buffers."""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.errors import ConfigError
from livecurve.monitors import draw
from livecurve.monitors.alarms import level_alarms, zebra_mask
from livecurve.monitors.transfer import transfer_view
from livecurve.monitors.vectorscope import bar_targets, vectorscope
from livecurve.monitors.waveform import waveform
from tests.monitors.frames import bars_rgb, rgb_frame

BARS_YPBPR = rgb_frame(bars_rgb(amplitude=0.75, height=40, bar_width=30), space="ypbpr")


def _colour_count(img, colour):
    return int(np.all(img == np.array(colour, np.uint8), axis=2).sum())


def _grid_rows(img, x0, x1):
    """Rows where the section x0…x1 is one long run of the graticule colour."""
    sec = np.all(img[:, x0:x1] == np.array(draw.GRID, np.uint8), axis=2)
    return np.flatnonzero(sec.mean(axis=1) > 0.5)


def test_waveform_panel_side_by_side():
    counts = waveform(BARS_YPBPR, space="ypbpr", columns=210)
    img = draw.draw_waveform(counts, space="ypbpr", size=(256, 768))
    assert img.shape == (256, 768, 3) and img.dtype == np.uint8
    for colour in draw.TRACE_YPBPR:          # every channel's trace is drawn at full strength
        assert _colour_count(img, colour) > 100
    rows = _grid_rows(img, 40, 250)           # inside the Y′ section
    assert len(rows) == 2                     # graticule at 0 and 700 mV
    assert rows[0] < rows[1]                  # 700 mV above 0 mV


def test_waveform_single_channel_and_buffer_reuse():
    counts = waveform(BARS_YPBPR, space="ypbpr", channels=(0,))
    buf = np.zeros((200, 300, 3), np.uint8)
    img = draw.draw_waveform(counts, space="ypbpr", layout="single", size=(200, 300), out=buf)
    assert img is buf
    assert _colour_count(img, draw.TRACE_YPBPR[0]) > 50
    assert _colour_count(img, draw.TRACE_YPBPR[1]) == 0


def test_vectorscope_panel_puts_bars_on_their_targets():
    size = 320
    hist = vectorscope(BARS_YPBPR, space="ypbpr", standard="bt709")
    img = draw.draw_vectorscope(hist, standard="bt709", size=size)
    assert img.shape == (size, size, 3)
    trace = np.all(img == np.array(draw.SCOPE_TRACE, np.uint8), axis=2)
    px_per_mv = size / 800.0
    for name, (pb, pr) in bar_targets("bt709", 0.75).items():
        x = size / 2 + pb * 1000 * px_per_mv
        y = size / 2 - pr * 1000 * px_per_mv
        win = trace[int(y) - 1:int(y) + 3, int(x) - 1:int(x) + 3]
        assert win.any(), name
    # nothing else is lit: trace pixels only near the 7 points (6 bars + white)
    ys, xs = np.nonzero(trace)
    assert len(ys) < 7 * 16


def test_transfer_panel():
    cin = np.linspace(-0.4, 0.4, 41)
    view = transfer_view(cin, np.tanh(3 * cin) / 3, BARS_YPBPR, bins=64)
    img = draw.draw_transfer(view, size=(240, 320))
    assert img.shape == (240, 320, 3)
    assert _colour_count(img, draw.TRACE_YPBPR[0]) > 20     # curve and histogram strip
    assert (img != np.array(draw.BACKGROUND, np.uint8)).any(axis=2).mean() > 0.05


def test_alarm_panel_marks_alarms_only_when_there_are_some():
    conv = np.array([[-0.5, 0.5]] * 3)
    clean = level_alarms(np.zeros((3, 8, 8), np.float32), space="ypbpr",
                         converter_limits_v=conv)
    hot = np.zeros((3, 8, 8), np.float32)
    hot[0, 0, 0] = 0.6
    alarmed = level_alarms(hot, space="ypbpr", converter_limits_v=conv)
    a = draw.draw_alarms(clean, size=(120, 320))
    b = draw.draw_alarms(alarmed, size=(120, 320))
    assert a.shape == b.shape == (120, 320, 3)
    assert _colour_count(a, draw.ALARM_HOT) == 0
    assert _colour_count(b, draw.ALARM_HOT) > 0
    assert _colour_count(a, draw.TEXT) > 0


def test_zebra_overlay_paints_exactly_the_mask():
    rng = np.random.default_rng(71)
    pic = rng.integers(0, 256, (30, 40, 3), dtype=np.uint8)
    p = rng.uniform(-0.6, 0.6, (3, 30, 40)).astype(np.float32)
    mask = zebra_mask(p, space="rgb", converter_limits_v=(-0.5, 0.5))
    out = draw.zebra_overlay(pic, mask)
    for code, colour in draw.ZEBRA.items():
        assert np.all(out[mask == code] == colour)
    np.testing.assert_array_equal(out[mask == 0], pic[mask == 0])
    same = pic.copy()
    assert draw.zebra_overlay(same, mask, out=same) is same      # in place
    np.testing.assert_array_equal(same, out)


def test_compose_tiles_with_labels():
    red = np.zeros((90, 160, 3), np.uint8)
    red[:] = (0, 0, 255)
    tall = np.full((300, 100, 3), 200, np.uint8)
    img = draw.compose([("picture", red), ("scope", tall), ("x", red)], columns=2,
                       tile_size=(180, 320), gap=4)
    assert img.shape == (2 * 180 + 4, 2 * 320 + 4, 3)
    assert np.all(img[90, 160] == (0, 0, 255))                    # first tile's middle
    assert np.all(img[90, 324 + 160] == 200)                      # aspect kept, centred
    assert np.all(img[90, 324 + 10] == (8, 8, 8))                 # letterbox beside it
    assert _colour_count(img[:20, :120], draw.TEXT) > 0           # label drawn
    again = draw.compose([("picture", red), ("scope", tall), ("x", red)], columns=2,
                         tile_size=(180, 320), gap=4, smooth=False, out=img)
    assert again is img
    assert np.all(img[90, 160] == (0, 0, 255)) and np.all(img[90, 324 + 160] == 200)


@pytest.mark.parametrize("call", [
    lambda: draw.draw_waveform(np.zeros((3, 8, 8), np.uint32), space="ypbpr", layout="x"),
    lambda: draw.draw_waveform(np.zeros((8, 8), np.uint32), space="ypbpr"),
    lambda: draw.draw_vectorscope(np.zeros((8, 9), np.uint32), standard="bt709"),
    lambda: draw.compose([]),
    lambda: draw.compose([("a", np.zeros((4, 4), np.uint8))]),
    lambda: draw.zebra_overlay(np.zeros((4, 4, 3), np.uint8), np.zeros((4, 5), np.uint8)),
    lambda: draw.draw_alarms("not alarms"),
    lambda: draw.draw_transfer(transfer_view([0, 1], [0, 1], np.zeros((3, 2, 2))),
                               channels=(5,)),
])
def test_bad_input_is_a_config_error(call):
    with pytest.raises(ConfigError):
        call()
