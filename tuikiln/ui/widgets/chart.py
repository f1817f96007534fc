"""The temperature chart: planned curve, setpoint, chamber and load, with "now" marked."""

from __future__ import annotations

from rich.segment import Segment
from rich.style import Style
from textual.reactive import reactive
from textual.strip import Strip
from textual.widget import Widget

from tuikiln.ui.chartdraw import ChartSpec, ChartStyles, render_chart

# Colours chosen to read on dark and on light backgrounds alike (our own choice).
DARK_PALETTE = {
    "chamber": Style(color="#ff8c42", bold=True),
    "load": Style(color="#4dabf7", bold=True),
    "core": Style(color="#b197fc"),
    "setpoint": Style(color="#69db7c"),
    "plan": Style(color="#adb5bd"),
}
LIGHT_PALETTE = {
    "chamber": Style(color="#c2410c", bold=True),
    "load": Style(color="#1d4ed8", bold=True),
    "core": Style(color="#7e22ce"),
    "setpoint": Style(color="#15803d"),
    "plan": Style(color="#6b7280"),
}
LEGEND_NAMES = {
    "chamber": "chamber",
    "load": "load",
    "core": "core (estimate)",
    "setpoint": "setpoint",
    "plan": "plan",
}


class TemperatureChart(Widget):
    """Braille line chart of a run; draws whatever ChartSpec it is given."""

    DEFAULT_CSS = """
    TemperatureChart {
        height: 1fr;
        min-height: 6;
    }
    """

    spec: reactive[ChartSpec | None] = reactive(None, always_update=True)
    """What to draw (built by tuikiln.ui.chartdata); None draws an empty frame."""

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self._cache_key: tuple | None = None
        self._strips: list[Strip] = []

    def watch_spec(self) -> None:
        self._cache_key = None
        self.refresh()

    def palette(self) -> dict[str, Style]:
        return DARK_PALETTE if self.app.current_theme.dark else LIGHT_PALETTE

    def strips(self) -> list[Strip]:
        width, height = self.size
        key = (width, height, id(self.spec), self.app.current_theme.dark)
        if key != self._cache_key:
            self._cache_key = key
            if self.spec is None or width <= 0 or height <= 0:
                self._strips = []
            else:
                styles = ChartStyles(axis=Style(dim=True), now=Style(bold=True),
                                     cursor=Style(reverse=True, bold=True))
                base = self.rich_style
                palette = self.palette()
                lines = [self.legend(palette, width)]
                lines += render_chart(self.spec, width, height - 1, palette, styles)
                self._strips = [strip.apply_style(base) for strip in lines]
        return self._strips

    def legend(self, palette: dict[str, Style], width: int) -> Strip:
        """One line naming each trace drawn: solid lines are readings, dashed are plans."""
        assert self.spec is not None
        segments = [Segment(" ")]
        seen: list[str] = []
        for trace in self.spec.traces:
            if trace.role in seen:
                continue
            seen.append(trace.role)
            mark = "┄┄" if trace.dashed else "━━"
            segments += [Segment(mark, palette.get(trace.role)),
                         Segment(f" {LEGEND_NAMES.get(trace.role, trace.role)}  ")]
        if self.spec.now is not None:
            segments.append(Segment("│ now", Style(bold=True)))
        if self.spec.cursor is not None:
            segments.append(Segment("┃ cursor", Style(bold=True)))
        return Strip(segments).crop_extend(0, width, None)

    def render_line(self, y: int) -> Strip:
        strips = self.strips()
        if 0 <= y < len(strips):
            return strips[y]
        return Strip.blank(self.size.width, self.rich_style)
