"""Draw temperature traces as braille dots: a pure function from series to styled lines.

Every terminal cell holds a 2 x 4 grid of braille dots, so a 100-column chart has 200 dot
columns. Each trace is thinned to one min/max bucket per dot column (tuikiln.thinning),
so a one-sample overshoot still lights the top dot of its column. Where traces share a cell
the first trace in the list gives the cell its colour; the dots of all traces are kept.

Without braille (the Linux console) or without colour (NO_COLOR), each trace is drawn with
its own mark, one a cell (tuikiln.ui.glyphs): a cell any of whose dots a trace lights shows
that trace's mark, the first trace in the list winning, so lines differ by shape.

No Textual here beyond `Strip` (a list of Rich segments), so the drawing is testable alone.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip

from tuikiln.thinning import min_max_buckets
from tuikiln.ui.glyphs import BRAILLE_GLYPHS, Glyphs

BRAILLE = np.array([chr(0x2800 + bits) for bits in range(256)] + [" "])
# Bit of each dot in a braille cell, by (row 0-3, column 0-1) (Unicode braille patterns).
DOT_BITS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.int32)
AXIS_WIDTH = 6  # room for 5-character temperature labels and the axis line
NICE_STEPS_S = (60, 300, 600, 900, 1800, 3600, 7200, 10800, 21600, 43200, 86400, 172800)


@dataclass(frozen=True)
class Trace:
    """One line on the chart, already in display units."""

    role: str
    """Which line this is ("chamber", "load", "setpoint", "plan"): the palette colours it."""
    t: np.ndarray
    y: np.ndarray
    dashed: bool = False
    max_gap_s: float = 900.0
    """Columns between samples closer than this are joined by a straight line; a longer gap
    (the engine was away) stays empty. math.inf: a piecewise-linear curve such as the plan."""


@dataclass(frozen=True)
class ChartSpec:
    t_start: float
    t_end: float
    y_low: float
    """The axis reaches at least down to here and up to y_high (display units); it grows to
    take in every value drawn, plus a little headroom so an overshoot shows as one."""
    y_high: float
    traces: Sequence[Trace]
    now: float | None = None
    cursor: float | None = None
    t_origin: float = 0.0
    """Time labels count from here (the run's start)."""
    y_scale: float = 1.0
    """Trace values are shown as value * y_scale + y_offset (°C to °F: 1.8 and 32), applied
    after thinning so a week of samples is never converted whole."""
    y_offset: float = 0.0


@dataclass(frozen=True)
class ChartStyles:
    axis: Style = Style(dim=True)
    now: Style = Style(bold=True)
    cursor: Style = Style(reverse=True)


def nice_step(span: float, slots: int) -> float:
    """A round step (1, 2, 2.5 or 5 x 10^n) giving about `slots` ticks over `span`."""
    if span <= 0 or slots <= 0:
        return 1.0
    raw = span / slots
    power = 10 ** math.floor(math.log10(raw))
    for multiple in (1, 2, 2.5, 5, 10):
        if multiple * power >= raw:
            return multiple * power
    return 10 * power


def time_step(span_s: float, slots: int) -> float:
    for step in NICE_STEPS_S:
        if span_s / step <= slots:
            return float(step)
    return float(NICE_STEPS_S[-1] * math.ceil(span_s / slots / NICE_STEPS_S[-1]))


def elapsed_label(seconds: float) -> str:
    """'0', '45m', '2h', '1h30', '3d'."""
    whole = int(round(seconds / 60.0))
    days, rest = divmod(whole, 24 * 60)
    hours, minutes = divmod(rest, 60)
    if days and not hours and not minutes:
        return f"{days}d"
    hours += days * 24
    if hours and minutes:
        return f"{hours}h{minutes:02d}"
    if hours:
        return f"{hours}h"
    return f"{minutes}m" if minutes else "0"


def dot_rows(values: np.ndarray, y_low: float, y_high: float, rows: int) -> np.ndarray:
    """Dot row (0 = top) of each value; NaN stays NaN."""
    scale = (rows - 1) / (y_high - y_low) if y_high > y_low else 0.0
    with np.errstate(invalid="ignore"):
        return np.clip(np.round((y_high - values) * scale), 0, rows - 1)


def trace_columns(trace: Trace, spec: ChartSpec, dot_cols: int
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(low, high, last) of the trace in each dot column, in display units; NaN: nothing."""
    t, y = trace.t, trace.y
    if math.isinf(trace.max_gap_s) and t.size:
        # A curve given by its breakpoints: add its values at the view's edges.
        edges = np.array([spec.t_start, spec.t_end])
        inside = (edges >= t[0]) & (edges <= t[-1])
        if inside.any():
            order = np.argsort(np.concatenate((t, edges[inside])), kind="stable")
            y = np.concatenate((y, np.interp(edges[inside], t, y)))[order]
            t = np.concatenate((t, edges[inside]))[order]
    buckets = min_max_buckets(t, y, spec.t_start, spec.t_end, dot_cols)
    low, high, last = fill_gaps(buckets.low, buckets.high, buckets.first, buckets.last,
                                trace.max_gap_s / ((spec.t_end - spec.t_start) / dot_cols))
    if spec.y_scale != 1.0 or spec.y_offset != 0.0:
        low, high, last = (v * spec.y_scale + spec.y_offset for v in (low, high, last))
    return low, high, last


def columns_mask(columns: tuple[np.ndarray, np.ndarray, np.ndarray], dashed: bool,
                 y_low: float, y_high: float, dot_row_count: int) -> np.ndarray:
    """Boolean (dot rows, dot columns) grid of the dots a trace lights."""
    low, high, last = columns
    dot_cols = low.shape[0]
    top = dot_rows(high, y_low, y_high, dot_row_count)
    bottom = dot_rows(low, y_low, y_high, dot_row_count)
    # Join each column to the last value of the one before it, so steep ramps stay unbroken.
    before = dot_rows(np.roll(last, 1), y_low, y_high, dot_row_count)
    before[0] = np.nan
    joined = np.isfinite(before) & np.isfinite(top)
    top = np.where(joined, np.fmin(top, before), top)
    bottom = np.where(joined, np.fmax(bottom, before), bottom)
    top = np.where(np.isfinite(top), top, np.inf)
    bottom = np.where(np.isfinite(bottom), bottom, -np.inf)
    rows = np.arange(dot_row_count)[:, None]
    mask = (rows >= top[None, :]) & (rows <= bottom[None, :])
    if dashed:
        mask &= (np.arange(dot_cols) % 4 < 2)[None, :]
    return mask


def braille_bits(mask: np.ndarray, rows: int, cells: int) -> np.ndarray:
    """The braille pattern number (0-255) of each cell from its 4 x 2 dots."""
    dots = mask.reshape(rows, 4, cells, 2)
    bits = np.zeros((rows, cells), dtype=np.int32)
    for dot_row in range(4):
        for dot_col in range(2):
            bits |= dots[:, dot_row, :, dot_col] * int(DOT_BITS[dot_row, dot_col])
    return bits


def axis_range(spec: ChartSpec, columns: Sequence[tuple[np.ndarray, ...]]
               ) -> tuple[float, float]:
    """From the spec's extents, grown to every value drawn, with headroom; round below."""
    lows = [float(np.nanmin(c[0])) for c in columns if np.isfinite(c[0]).any()]
    highs = [float(np.nanmax(c[1])) for c in columns if np.isfinite(c[1]).any()]
    low = min([spec.y_low, *lows])
    high = max([spec.y_high, *highs])
    headroom = max(10.0, (high - low) * 0.06)
    return math.floor(low / 10.0) * 10.0, high + headroom


def fill_gaps(
    low: np.ndarray, high: np.ndarray, first: np.ndarray, last: np.ndarray, max_columns: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fill empty columns lying between two filled ones at most `max_columns` apart."""
    filled = np.nonzero(np.isfinite(high))[0]
    if filled.size < 2:
        return low, high, last
    empty = np.nonzero(~np.isfinite(high))[0]
    empty = empty[(empty > filled[0]) & (empty < filled[-1])]
    if empty.size == 0:
        return low, high, last
    after = np.searchsorted(filled, empty)
    left, right = filled[after - 1], filled[after]
    near = (right - left) <= max_columns
    empty, left, right = empty[near], left[near], right[near]
    share = (empty - left) / (right - left)
    values = last[left] + (first[right] - last[left]) * share
    low, high, last = low.copy(), high.copy(), last.copy()
    low[empty] = high[empty] = last[empty] = values
    return low, high, last


def cell_column(t: float | None, spec: ChartSpec, cells: int) -> int | None:
    if t is None or not spec.t_end > spec.t_start:
        return None
    column = int((t - spec.t_start) / (spec.t_end - spec.t_start) * cells)
    return column if 0 <= column < cells else None


def y_axis_labels(y_low: float, y_high: float, rows: int) -> dict[int, str]:
    """Text row -> label, at round temperatures."""
    step = nice_step(y_high - y_low, max(1, rows // 3))
    labels: dict[int, str] = {}
    value = math.ceil(y_low / step) * step
    while value <= y_high + 1e-9:
        row = int(dot_rows(np.array([value]), y_low, y_high, rows * 4)[0]) // 4
        labels.setdefault(row, f"{value:.0f}")
        value += step
    return labels


def time_axis(spec: ChartSpec, cells: int, label: Callable[[float], str],
              tick_mark: str = "╵") -> str:
    """The bottom line: round elapsed times under their columns."""
    span = spec.t_end - spec.t_start
    line = [" "] * cells
    if span <= 0:
        return "".join(line)
    step = time_step(span, max(1, cells // 9))
    tick = math.ceil((spec.t_start - spec.t_origin) / step) * step + spec.t_origin
    while tick <= spec.t_end:
        column = cell_column(tick, spec, cells)
        text = label(tick - spec.t_origin)
        if column is not None and column + 1 + len(text) <= cells and all(
            c == " " for c in line[max(0, column - 1) : column + len(text) + 1]
        ):
            line[column] = tick_mark
            for offset, char in enumerate(text):
                if column + 1 + offset < cells:
                    line[column + 1 + offset] = char
        tick += step
    return "".join(line)


def render_chart(
    spec: ChartSpec,
    width: int,
    height: int,
    palette: Mapping[str, Style] | None = None,
    styles: ChartStyles = ChartStyles(),
    label: Callable[[float], str] = elapsed_label,
    glyphs: Glyphs = BRAILLE_GLYPHS,
    shapes: bool = False,
) -> list[Strip]:
    """`height` lines of `width` cells: y labels, the plot, and a time axis at the bottom."""
    if width < 8 or height < 3:
        return [Strip([Segment(" " * max(0, width))]) for _ in range(max(0, height))]
    plot = plot_layout(spec, width, height, label)
    return draw_plot(plot, spec, palette, styles, label, glyphs, shapes)


@dataclass(frozen=True)
class PlotLayout:
    """A chart reduced to what decides its cells: equal keys draw equal lines."""

    width: int
    height: int
    columns: list[tuple[np.ndarray, np.ndarray, np.ndarray]]
    y_low: float
    y_high: float
    key: bytes


def plot_layout(spec: ChartSpec, width: int, height: int,
                label: Callable[[float], str] = elapsed_label) -> PlotLayout:
    """Thin every trace to the dot columns and fix the axis range; `key` changes only
    when a dot, a label or a marker would move (a second of new samples seldom does)."""
    rows = height - 1
    cells = width - AXIS_WIDTH
    dot_cols, dot_row_count = cells * 2, rows * 4
    columns = [trace_columns(trace, spec, dot_cols) for trace in spec.traces]
    y_low, y_high = axis_range(spec, columns)
    parts = [repr((width, height, y_low, y_high, cell_column(spec.now, spec, cells),
                   cell_column(spec.cursor, spec, cells),
                   [(trace.role, trace.dashed) for trace in spec.traces],
                   time_axis(spec, cells, label))).encode()]
    with np.errstate(invalid="ignore"):
        for trio in columns:
            parts += [np.nan_to_num(dot_rows(v, y_low, y_high, dot_row_count), nan=-1.0)
                      .astype(np.int16).tobytes() for v in trio]
    return PlotLayout(width, height, columns, y_low, y_high, b"|".join(parts))


def draw_plot(
    plot: PlotLayout,
    spec: ChartSpec,
    palette: Mapping[str, Style] | None = None,
    styles: ChartStyles = ChartStyles(),
    label: Callable[[float], str] = elapsed_label,
    glyphs: Glyphs = BRAILLE_GLYPHS,
    shapes: bool = False,
) -> list[Strip]:
    """The lines of a chart laid out by `plot_layout`: braille dots, or each trace's mark
    when the glyphs have no braille or `shapes` is asked for (no colour to tell them by)."""
    rows = plot.height - 1
    axis_width = AXIS_WIDTH
    cells = plot.width - axis_width
    dot_row_count = rows * 4
    traces = list(spec.traces)
    columns, y_low, y_high = plot.columns, plot.y_low, plot.y_high
    labels = y_axis_labels(y_low, y_high, rows)
    owners = np.full((rows, cells), -1, dtype=np.int32)
    bits = np.zeros((rows, cells), dtype=np.int32)
    by_mark = shapes or not glyphs.braille
    chars = np.full((rows, cells), " ", dtype="<U1")
    # Lowest priority first, so the first trace's colour (or mark) wins in a shared cell.
    for index in range(len(traces) - 1, -1, -1):
        # A mark is a whole cell: dashing it too would leave gaps a cell wide.
        dashed = traces[index].dashed and not by_mark
        mask = columns_mask(columns[index], dashed, y_low, y_high, dot_row_count)
        cell_bits = braille_bits(mask, rows, cells)
        owners = np.where(cell_bits > 0, index, owners)
        bits |= cell_bits
        if by_mark:
            chars[cell_bits > 0] = glyphs.mark(traces[index].role)
    if not by_mark:
        chars = np.where(bits > 0, BRAILLE[np.minimum(bits, 255)], " ").astype("<U1")
    palette = palette or {}
    trace_styles = [palette.get(trace.role, Style()) for trace in traces]
    marker_owner = len(traces)
    cursor_owner = len(traces) + 1
    for t, glyph, owner in ((spec.now, glyphs.now, marker_owner),
                            (spec.cursor, glyphs.cursor, cursor_owner)):
        column = cell_column(t, spec, cells)
        if column is None:
            continue
        empty = bits[:, column] == 0
        chars[empty, column] = glyph
        owners[empty, column] = owner
        if owner == cursor_owner:
            owners[~empty, column] = owner
    all_styles = trace_styles + [styles.now, styles.cursor, Style()]
    lines: list[Strip] = []
    for row in range(rows):
        text = labels.get(row)
        axis = (text[-(axis_width - 1):].rjust(axis_width - 1) + glyphs.axis_label) if text \
            else (" " * (axis_width - 1) + glyphs.axis_line)
        segments = [Segment(axis, styles.axis)]
        row_owners = owners[row]
        row_chars = chars[row]
        changes = np.nonzero(np.diff(row_owners))[0] + 1
        starts = np.concatenate(([0], changes))
        stops = np.concatenate((changes, [cells]))
        for start, stop in zip(starts.tolist(), stops.tolist(), strict=True):
            owner = int(row_owners[start])
            style = all_styles[owner] if owner >= 0 else None
            # A contiguous <U1 slice is UTF-32 text already: decode it in one go.
            segments.append(Segment(row_chars[start:stop].tobytes().decode("utf-32-le"), style))
        lines.append(Strip(segments, plot.width))
    bottom = (" " * (axis_width - 1) + glyphs.corner
              + time_axis(spec, cells, label, glyphs.time_tick))
    lines.append(Strip([Segment(bottom, styles.axis)], plot.width))
    return lines


def strips_text(strips: Sequence[Strip]) -> list[str]:
    """The plain text of rendered lines (tests and the benchmark)."""
    return ["".join(segment.text for segment in strip) for strip in strips]
