"""The raster canvas and plot panels behind the report figures: PNG encoding, ticks, transforms,
clipping, text and marker placement, and the square-root spectrum scale."""
from __future__ import annotations

import io
import math
import struct
import zlib

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from wavecal.report.canvas import Canvas, encode_png, text_width
from wavecal.report.chart import Panel, clock_ticks, limits, nice_ticks, tick_labels
from wavecal.report.figures import drift_figure, spectrum_figure
from wavecal.solution import LINE_COLUMNS, Solution

WHITE = (255, 255, 255)


def _pixels(canvas: Canvas) -> np.ndarray:
    return np.asarray(canvas.image()).astype(int)


def test_png_decodes_to_the_same_pixels():
    rng = np.random.default_rng(3)
    rgb = rng.integers(0, 256, size=(37, 53, 3), dtype=np.uint8)
    png = encode_png(rgb)
    # signature from the PNG specification (W3C PNG 2nd edition, section 5.2)
    assert png[:8] == bytes([137, 80, 78, 71, 13, 10, 26, 10])
    # decoded by Pillow's PNG reader (checks every chunk CRC) and by the standard zlib
    decoded = np.asarray(Image.open(io.BytesIO(png)).convert("RGB"))
    np.testing.assert_array_equal(decoded, rgb)
    width, height = struct.unpack(">II", png[16:24])
    assert (width, height) == (53, 37)
    idat_length = struct.unpack(">I", png[33:37])[0]
    assert png[37:41] == b"IDAT"
    raw = zlib.decompress(png[41:41 + idat_length])
    assert len(raw) == 37 * (53 * 3 + 1)
    assert raw[::53 * 3 + 1] == bytes(37)  # filter type 0 on every row


def test_canvas_png_matches_its_image():
    canvas = Canvas(120, 80)
    canvas.rect(10, 10, 60, 40, fill="#0072B2")
    canvas.text(5, 70, "λ 546.07 nm", size=12, anchor="ld")
    png = canvas.png()
    decoded = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)
    np.testing.assert_array_equal(decoded, _pixels(canvas))
    assert tuple(decoded[25, 35]) == (0, 114, 178)  # #0072B2
    assert (decoded[55:75, 5:60] < 200).any()  # the text is drawn


@pytest.mark.parametrize("lo, hi", [(0.0, 1023.0), (-0.0537, 0.0412), (451.2, 641.9),
                                    (1e-4, 3e-4), (-5.0, 5.0)])
def test_nice_ticks_are_round_and_inside(lo, hi):
    ticks = nice_ticks(lo, hi, 6)
    assert 3 <= ticks.size <= 8
    assert ticks.min() >= lo - 1e-12 and ticks.max() <= hi + 1e-12
    steps = np.diff(ticks)
    np.testing.assert_allclose(steps, steps[0], rtol=1e-9)
    mantissa = steps[0] / 10 ** np.floor(np.log10(steps[0]))
    # round steps 1, 2, 2.5 or 5 times a power of ten (common practice)
    assert min(abs(mantissa - m) for m in (1, 2, 2.5, 5, 10)) < 1e-9


def test_tick_labels_use_just_enough_decimals():
    assert tick_labels(np.array([0.0, 200.0, 400.0])) == ["0", "200", "400"]
    assert tick_labels(np.array([-0.05, -0.025, 0.0, 0.025])) == [
        "\u22120.050", "\u22120.025", "0.000", "0.025"]
    assert tick_labels(np.array([450.0, 500.0, 550.0])) == ["450", "500", "550"]


def test_integer_ticks_for_counts():
    ticks = nice_ticks(0.0, 3.2, 5, integer=True)
    assert np.all(ticks == np.round(ticks))


def test_clock_ticks_cross_midnight():
    ticks, labels = clock_ticks(19.7, 27.1, lambda h: f"{int(h) % 24:02d}:{round(h % 1 * 60):02d}")
    assert labels[0] == "20:00" and "00:00" in labels
    assert np.all(np.diff(ticks) == 2.0) or np.all(np.diff(ticks) == 1.0)


def test_limits_pad_and_degenerate_ranges():
    assert limits([0.0, 10.0], pad=0.1) == pytest.approx((-1.0, 11.0))
    lo, hi = limits([5.0, 5.0])
    assert lo < 5.0 < hi
    assert limits([np.nan]) == (0.0, 1.0)


def test_panel_maps_limits_to_its_box_and_keeps_data_inside():
    canvas = Canvas(200, 150)
    panel = Panel(canvas, (40, 20, 190, 120), (0.0, 10.0), (-1.0, 1.0))
    assert panel.x(0.0) == pytest.approx(40.0) and panel.x(10.0) == pytest.approx(190.0)
    assert panel.y(-1.0) == pytest.approx(120.0) and panel.y(1.0) == pytest.approx(20.0)
    # a marker outside the limits is left out; a line beyond them stops at the frame
    panel.points([20.0], [0.0], "o", "#D55E00", size=9)
    panel.line([5.0, 5.0], [0.0, 50.0], "#D55E00", width=3)
    px = _pixels(canvas)
    assert tuple(px[70, 195]) == WHITE  # where x = 20 would have been (past the right edge)
    assert not (px[:18, 100:130] == (213, 94, 0)).all(axis=2).any()  # nothing above the box
    assert (px[25:70, 115] == (213, 94, 0)).all()  # the line, up to the top of the box


def test_square_root_scale_ticks_are_round_counts():
    canvas = Canvas(300, 200)
    panel = Panel(canvas, (50, 10, 290, 180), (0.0, 1.0), (0.0, 250_000.0), ysqrt=True)
    values, labels = panel._yticks
    assert values[0] == 0.0
    digits = values[1:] / 10 ** (np.floor(np.log10(values[1:])) - 1)
    np.testing.assert_allclose(digits, np.round(digits))  # two significant digits
    assert values.size >= 4
    assert panel.y(250_000.0) == pytest.approx(10.0)
    assert panel.y(62_500.0) == pytest.approx(95.0)  # half-way up: sqrt(1/4) = 1/2
    assert labels[-1].endswith("k")


@pytest.mark.parametrize("anchor", ["la", "mm", "rd"])
def test_text_anchor(anchor):
    canvas = Canvas(300, 100)
    canvas.text(150, 50, "WWWW", size=20, anchor=anchor)
    ink = np.argwhere((_pixels(canvas) < 128).all(axis=2))
    width = text_width("WWWW", 20)
    left = {"l": 150, "m": 150 - width / 2, "r": 150 - width}[anchor[0]]
    assert ink[:, 1].min() == pytest.approx(left, abs=3)
    top, bottom = ink[:, 0].min(), ink[:, 0].max()
    if anchor[1] == "a":
        assert 50 <= top <= 56
    elif anchor[1] == "m":
        assert top < 50 < bottom
    else:
        assert bottom <= 50


def test_vertical_text_reads_upwards():
    canvas = Canvas(100, 200)
    canvas.text(50, 150, "Hg 546.07", size=14, anchor="md", vertical=True)
    ink = np.argwhere((_pixels(canvas) < 128).all(axis=2))
    assert ink[:, 0].max() <= 150 and ink[:, 0].min() < 150 - 0.8 * text_width("Hg 546.07", 14)
    assert ink[:, 1].max() - ink[:, 1].min() < 20


def test_faint_line_shows_beside_a_bright_one():
    """A line 100 times fainter than the brightest still rises well above the baseline
    (the square-root scale: on a linear scale it would be about 1 pixel tall)."""
    x = np.arange(1024.0)
    flux = (1e5 * np.exp(-0.5 * ((x - 300) / 1.2) ** 2)
            + 1e3 * np.exp(-0.5 * ((x - 700) / 1.2) ** 2))
    lines = pd.DataFrame({col: [math.nan, math.nan] for col in LINE_COLUMNS})
    lines["x"], lines["flux"] = [300.0, 700.0], [1e5, 1e3]
    lines["identification"], lines["element"] = ["unidentified"] * 2, [""] * 2
    solution = Solution(status="failed", reasons=("no solution",), medium="air", model=None,
                        lines=lines, frame="faint.fits")
    canvas = spectrum_figure(solution, (x, flux))
    px = _pixels(canvas)
    column = int(round(70 + 700 / 1023 * (1100 - 15 - 70)))
    inside = px[90:423, column - 2:column + 3]  # the plot box without its frame
    dark = np.flatnonzero((inside < 100).all(axis=2).any(axis=1))
    assert dark.size and (dark.max() - dark.min()) >= 8


def test_drift_figure_without_times_says_so():
    canvas = drift_figure(pd.DataFrame({"configuration": ["a"], "observation_time": [""],
                                        "shift_px": [0.1]}))
    assert canvas.image().size == (1000, 340)
