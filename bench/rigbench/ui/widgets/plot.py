"""A braille-dot line plot for live telemetry: the one plot widget of the terminal UI.

Each terminal cell holds a 2 × 4 grid of braille dots, so a plot of W × H cells has 2W
sub-columns and 4H dot rows. For every sub-column the samples falling into it are reduced to
their minimum and maximum (so a spike between two redraws is never lost) and the dots between
them are lit; a column is also joined to its neighbour so a steep edge stays a line. Rows are
built once per new data as numpy bit masks and cached as one ``Strip`` per row, so
``render_line`` only returns a cached strip: a redraw of a 2 000-sample window at 100 × 10
cells costs about a millisecond (DEVELOPERS.md, Practice notes). Values above or below the scale are
drawn on the top or bottom row.

Braille cells follow the Unicode Standard's Braille Patterns block (U+2800–U+28FF): dot n
(numbered 1-2-3 down the left column, 4-5-6 down the right, then 7 and 8 on the bottom row)
is bit n−1 of the offset from U+2800.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip
from textual.widget import Widget

# Bit of each dot in a braille cell, indexed [dot row 0..3 from the top][dot column 0..1]
# (Unicode Braille Patterns: dots 1,2,3,7 left and 4,5,6,8 right).
DOT_BITS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.uint8)
BRAILLE_BASE = 0x2800
N_TRACE_STYLES = 4
GUTTER = 8  # cells left of the plot for the scale labels
EMPTY, ZERO = -2, -1  # owners of a cell with no trace dots: blank, or the dashed zero line


def fill_empty(owner: np.ndarray) -> np.ndarray:
    """Blank cells take the style of the cell before them (a blank braille cell looks the
    same in any colour), so a row is a few long segments instead of one per cell."""
    idx = np.where(owner != EMPTY, np.arange(len(owner)), 0)
    np.maximum.accumulate(idx, out=idx)
    out = owner[idx]
    out[out == EMPTY] = 0
    return out


@dataclass(frozen=True)
class Scale:
    """The vertical range drawn, in the signal's display unit."""

    low: float
    high: float


def column_spans(t_s: np.ndarray, y: np.ndarray, t0_s: float, t1_s: float, columns: int,
                 low: float, high: float, dot_rows: int):
    """Lowest and highest lit dot row (0 = bottom) of each of ``columns`` sub-columns.

    Samples with t0_s <= t < t1_s are binned by time; a sub-column without samples is
    marked empty (bottom > top). Each non-empty column is stretched to touch the previous
    non-empty one so that steep edges stay connected.
    """
    bottom = np.ones(columns, dtype=np.int64)
    top = np.zeros(columns, dtype=np.int64)
    if len(t_s) == 0 or t1_s <= t0_s or columns <= 0 or dot_rows <= 0:
        return bottom, top
    edges = t0_s + (t1_s - t0_s) * np.arange(columns + 1) / columns
    idx = np.searchsorted(t_s, edges, side="left")
    lo_i, hi_i = int(idx[0]), int(idx[-1])
    if hi_i <= lo_i:
        return bottom, top
    yy = np.asarray(y[lo_i:hi_i], dtype=np.float64)
    starts = idx[:-1] - lo_i
    filled = idx[1:] > idx[:-1]
    first = starts[filled]
    col_min = np.minimum.reduceat(yy, first)
    col_max = np.maximum.reduceat(yy, first)
    span = high - low if high > low else 1.0
    scale = (dot_rows - 1) / span
    a = np.clip(np.rint((col_min - low) * scale), 0, dot_rows - 1).astype(np.int64)
    b = np.clip(np.rint((col_max - low) * scale), 0, dot_rows - 1).astype(np.int64)
    # join each column to the previous one (in the later column)
    if len(a) > 1:
        prev_a, prev_b = a[:-1].copy(), b[:-1].copy()
        rise = a[1:] > prev_b + 1
        fall = b[1:] < prev_a - 1
        a[1:] = np.where(rise, prev_b + 1, a[1:])
        b[1:] = np.where(fall, prev_a - 1, b[1:])
    bottom[filled] = a
    top[filled] = b
    return bottom, top


def braille_bits(bottom: np.ndarray, top: np.ndarray, width: int, height: int) -> np.ndarray:
    """Cell bit masks (height × width, row 0 at the top) lighting dot rows bottom..top."""
    dot_rows = 4 * height
    levels = np.arange(dot_rows - 1, -1, -1)[:, None]  # dot row 0 of the screen is the top
    lit = (levels >= bottom[None, :]) & (levels <= top[None, :])  # (4H, 2W)
    cells = lit.reshape(height, 4, width, 2) * DOT_BITS[None, :, None, :]
    return cells.sum(axis=(1, 3), dtype=np.uint16).astype(np.uint8)


def braille_text(bits_row: np.ndarray) -> str:
    """One row of cell bit masks as braille characters (empty cells are U+2800, blank)."""
    codes = bits_row.astype("<u4") + BRAILLE_BASE
    return codes.tobytes().decode("utf-32-le")


def format_tick(value: float) -> str:
    """A scale label that fits the gutter."""
    if value == 0:
        return "0"
    text = f"{value:.3g}"
    return text if len(text) < GUTTER else f"{value:.1e}"


class LinePlot(Widget):
    """A live line plot of one or more signals sharing a time axis and a vertical scale.

    Feed it with :meth:`show` (times in s, one array per trace); it keeps no history of its
    own. Colours come from the component classes ``lineplot--trace-0`` … ``-3``,
    ``lineplot--zero`` and ``lineplot--label``, so the theme decides them.
    """

    COMPONENT_CLASSES = {
        "lineplot--label", "lineplot--zero",
        *(f"lineplot--trace-{i}" for i in range(N_TRACE_STYLES)),
    }
    DEFAULT_CSS = """
    LinePlot { height: 1fr; min-height: 4; background: $surface; }
    LinePlot > .lineplot--label { color: $text-muted; }
    LinePlot > .lineplot--zero { color: $foreground 35%; }
    LinePlot > .lineplot--trace-0 { color: $primary; }
    LinePlot > .lineplot--trace-1 { color: $warning; }
    LinePlot > .lineplot--trace-2 { color: $success; }
    LinePlot > .lineplot--trace-3 { color: $secondary; }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._t: np.ndarray = np.zeros(0)
        self._traces: list[np.ndarray] = []
        self._window: tuple[float, float] = (0.0, 1.0)
        self._scale = Scale(-1.0, 1.0)
        self._strips: list[Strip] = []
        self._built_for: tuple[int, int] = (-1, -1)
        self._style_cache: dict | None = None

    @property
    def scale(self) -> Scale:
        return self._scale

    def show(self, t_s: np.ndarray, traces: list[np.ndarray], *, t0_s: float, t1_s: float,
             scale: Scale) -> None:
        """Draw ``traces`` (display units) against ``t_s`` (s, ascending) over [t0_s, t1_s)."""
        self._t = np.asarray(t_s, dtype=np.float64)
        self._traces = [np.asarray(tr, dtype=np.float64) for tr in traces]
        self._window = (float(t0_s), float(t1_s))
        self._scale = scale
        self._build()
        self.refresh()

    def on_resize(self) -> None:
        self._build()

    def _build(self) -> None:
        width, height = self.size.width, self.size.height
        self._built_for = (width, height)
        plot_w = max(0, width - GUTTER)
        if plot_w <= 0 or height <= 0:
            self._strips = []
            return
        low, high = self._scale.low, self._scale.high
        t0, t1 = self._window
        bits = np.zeros((height, plot_w), dtype=np.uint8)
        owner = np.full((height, plot_w), EMPTY, dtype=np.int8)
        for k, y in enumerate(self._traces):
            bottom, top = column_spans(self._t, y, t0, t1, 2 * plot_w, low, high, 4 * height)
            tb = braille_bits(bottom, top, plot_w, height)
            bits |= tb
            owner[tb != 0] = k % N_TRACE_STYLES
        zero_row = None
        if low < 0.0 < high:
            level = int(np.rint(-low / (high - low) * (4 * height - 1)))
            zero_row = (4 * height - 1 - level) // 4
            zero_bit = DOT_BITS[(4 * height - 1 - level) % 4, 0]
            dash = (bits[zero_row] == 0) & (np.arange(plot_w) % 2 == 0)
            bits[zero_row, dash] = zero_bit
            owner[zero_row, dash] = ZERO
        styles = self._styles()
        self._strips = [self._row_strip(r, bits[r], fill_empty(owner[r]), r == zero_row,
                                        height, styles, styles["label"])
                        for r in range(height)]

    def _styles(self) -> dict:
        """Rich styles of the parts, on the widget's background; cached until the CSS or
        the theme changes (reading them costs more than drawing a row)."""
        if self._style_cache is None:
            base: Style = self.rich_style
            styles = {ZERO: base + self.get_component_rich_style("lineplot--zero"),
                      "label": base + self.get_component_rich_style("lineplot--label")}
            for k in range(N_TRACE_STYLES):
                styles[k] = base + self.get_component_rich_style(f"lineplot--trace-{k}")
            self._style_cache = styles
        return self._style_cache

    def notify_style_update(self) -> None:
        self._style_cache = None
        super().notify_style_update()

    def _row_strip(self, r: int, bits: np.ndarray, owner: np.ndarray, is_zero: bool,
                   height: int, styles: dict, label_style: Style) -> Strip:
        if r == 0:
            label = format_tick(self._scale.high)
        elif r == height - 1:
            label = format_tick(self._scale.low)
        elif is_zero:
            label = "0"
        else:
            label = ""
        segments = [Segment(label.rjust(GUTTER - 1)[: GUTTER - 1] + " ", label_style)]
        text = braille_text(bits)
        bounds = np.flatnonzero(np.diff(owner)) + 1
        starts = [0, *bounds.tolist()]
        ends = [*bounds.tolist(), len(owner)]
        for a, b in zip(starts, ends):
            segments.append(Segment(text[a:b], styles[int(owner[a])]))
        return Strip(segments, GUTTER + len(owner))

    def row_text(self, r: int) -> str:
        """The plain text of row ``r`` (scale label and braille cells), for tests and logs."""
        if r >= len(self._strips):
            return ""
        return self._strips[r].text

    def render_line(self, y: int) -> Strip:
        if self._built_for != (self.size.width, self.size.height):
            self._build()
        if y >= len(self._strips):
            return Strip.blank(self.size.width, self.rich_style)
        return self._strips[y]
