"""The braille line plot draws signed data where it belongs (render output, not pixels).

Dot layout: the Unicode Standard, Braille Patterns block U+2800–U+28FF — dot n is bit n−1 of
the offset from U+2800; dots 1, 2, 3, 7 run down the left column, 4, 5, 6, 8 down the right.
"""

import asyncio

import numpy as np
from textual.app import App

from rigbench.ui.widgets.plot import GUTTER, LinePlot, Scale, braille_bits, braille_text, column_spans

WIDTH, HEIGHT = 40, 6  # plot cells: 32 x 6 -> 64 sub-columns, 24 dot rows
PLOT_W = WIDTH - GUTTER


def dots(ch: str) -> int:
    """Bit mask of a braille character (Unicode Braille Patterns: offset from U+2800)."""
    return ord(ch) - 0x2800


TOP_DOTS = 0x01 | 0x08  # dots 1 and 4: the top dot row of a cell (Unicode Braille Patterns)
BOTTOM_DOTS = 0x40 | 0x80  # dots 7 and 8: the bottom dot row


class PlotApp(App):
    def compose(self):
        yield LinePlot()


def render_rows(t, traces, scale, t0=0.0, t1=1.0):
    """The plot's rows as plain text after drawing ``traces``."""

    async def run():
        app = PlotApp()
        async with app.run_test(size=(WIDTH, HEIGHT)) as pilot:
            plot = app.query_one(LinePlot)
            plot.show(t, traces, t0_s=t0, t1_s=t1, scale=scale)
            await pilot.pause()
            assert plot.size.width == WIDTH and plot.size.height == HEIGHT
            return [plot.row_text(r) for r in range(HEIGHT)]

    return asyncio.run(run())


def cells(row: str) -> str:
    return row[GUTTER:]


def test_braille_code_points():
    # Unicode Braille Patterns: U+2801 is dot 1 alone, U+2880 dot 8 alone, U+28FF all eight.
    one_cell = np.array([[0x01]], dtype=np.uint8)
    assert braille_text(one_cell[0]) == "\u2801"
    bits = braille_bits(np.array([0, 0]), np.array([3, 3]), 1, 1)  # both columns, all rows
    assert braille_text(bits[0]) == "\u28ff"
    bits = braille_bits(np.array([1, 0]), np.array([0, 0]), 1, 1)  # right column, bottom dot
    assert braille_text(bits[0]) == "\u2880"


def test_signed_square_wave_lands_top_then_bottom():
    t = np.linspace(0.0, 1.0, 2000, endpoint=False)
    y = np.where(t < 0.5, 1.0, -1.0)
    rows = render_rows(t, [y], Scale(-1.0, 1.0))
    top, bottom = cells(rows[0]), cells(rows[-1])
    half = PLOT_W // 2
    # first half: value +1 = scale top -> top dot row of the top row, nothing at the bottom
    assert all(dots(c) & TOP_DOTS for c in top[1:half - 1])
    assert all(dots(c) & BOTTOM_DOTS == 0 for c in bottom[1:half - 1])
    # second half: value -1 = scale bottom
    assert all(dots(c) & BOTTOM_DOTS for c in bottom[half + 1:])
    assert all(dots(c) == 0 for c in top[half + 1:])
    # the step is drawn as a connected edge: every row has a lit cell at the switch
    for r in range(HEIGHT):
        assert any(dots(c) for c in cells(rows[r])[half - 1:half + 1]), r
    # scale labels: top, bottom, and zero on the row that holds the zero level
    assert rows[0][:GUTTER].strip() == "1" and rows[-1][:GUTTER].strip() == "-1"
    zero_level = round(1.0 / 2.0 * (4 * HEIGHT - 1))  # mid-scale dot row counted from bottom
    zero_row = (4 * HEIGHT - 1 - zero_level) // 4
    assert rows[zero_row][:GUTTER].strip() == "0"


def test_negative_constant_sits_below_zero_at_its_level():
    t = np.linspace(0.0, 1.0, 500, endpoint=False)
    value, low, high = -0.5, -2.0, 2.0
    rows = render_rows(t, [np.full_like(t, value)], Scale(low, high))
    level = round((value - low) / (high - low) * (4 * HEIGHT - 1))  # linear map, analytic
    screen_dot = 4 * HEIGHT - 1 - level
    r, k = divmod(screen_dot, 4)
    left_bit = [0x01, 0x02, 0x04, 0x40][k]  # Unicode Braille Patterns: dots 1, 2, 3, 7
    assert all(dots(c) & left_bit for c in cells(rows[r]))
    others = [i for i in range(HEIGHT) if i != r]
    zero_row = (4 * HEIGHT - 1 - round(-low / (high - low) * (4 * HEIGHT - 1))) // 4
    for i in others:
        lit = [c for c in cells(rows[i]) if dots(c)]
        if i == zero_row:  # only the dashed zero line, every other cell
            assert len(lit) <= (PLOT_W + 1) // 2
        else:
            assert not lit, i


def test_single_spike_survives_min_max_binning():
    t = np.linspace(0.0, 1.0, 4000, endpoint=False)
    y = np.zeros_like(t)
    y[1234] = 1.0  # one sample in 4 000: far narrower than a sub-column
    bottom, top = column_spans(t, y, 0.0, 1.0, 2 * PLOT_W, 0.0, 1.0, 4 * HEIGHT)
    col = int(t[1234] * 2 * PLOT_W)
    assert top[col] == 4 * HEIGHT - 1  # reaches the top dot row
    assert (top[:col - 1] == 0).all()


def test_out_of_scale_values_are_drawn_on_the_edge_rows():
    t = np.linspace(0.0, 1.0, 100, endpoint=False)
    rows = render_rows(t, [np.full_like(t, 50.0)], Scale(-1.0, 1.0))
    assert all(dots(c) & TOP_DOTS for c in cells(rows[0]))


def test_empty_window_draws_nothing_but_zero_line():
    rows = render_rows(np.zeros(0), [np.zeros(0)], Scale(-1.0, 1.0))
    lit = sum(1 for row in rows for c in cells(row) if dots(c))
    assert lit <= (PLOT_W + 1) // 2


def test_two_traces_keep_their_own_rows():
    t = np.linspace(0.0, 1.0, 1000, endpoint=False)
    rows = render_rows(t, [np.full_like(t, 1.0), np.full_like(t, -1.0)], Scale(-1.0, 1.0))
    assert all(dots(c) & TOP_DOTS for c in cells(rows[0]))
    assert all(dots(c) & BOTTOM_DOTS for c in cells(rows[-1]))
