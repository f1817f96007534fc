"""The temperature chart: planned curve, setpoint, chamber and load, with "now" marked."""

from __future__ import annotations

from rich.segment import Segment
from rich.style import Style
from textual.reactive import reactive
from textual.strip import Strip
from textual.widget import Widget

from tuikiln.ui.chartdraw import ChartSpec, ChartStyles, draw_plot, plot_layout, render_chart
from tuikiln.ui.glyphs import BRAILLE_GLYPHS, Glyphs

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
SHORT_LEGEND_NAMES = {**LEGEND_NAMES, "core": "core est.", "setpoint": "set"}


class TemperatureChart(Widget):
    """Braille line chart of a run; draws whatever ChartSpec it is given.

    The app's `glyphs` (tuikiln.ui.glyphs) say whether the terminal has braille; with
    NO_COLOR (Textual's `app.no_color`) every line is drawn with its own mark instead."""

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
        # A new spec arrives every second; redraw only when a cell would change.
        if self.is_mounted and self.size.width > 0 and not self.draw():
            return
        self.refresh()

    def on_resize(self) -> None:
        self.draw()
        self.refresh()

    def palette(self) -> dict[str, Style]:
        return DARK_PALETTE if self.app.current_theme.dark else LIGHT_PALETTE

    @property
    def glyphs(self) -> Glyphs:
        return getattr(self.app, "glyphs", BRAILLE_GLYPHS)

    @property
    def shapes(self) -> bool:
        """Lines told apart by their marks: no braille, or no colour to tell them by."""
        return bool(self.app.no_color) or not self.glyphs.braille

    def draw(self) -> bool:
        """Lay the chart out again; draw its lines only if they would differ. Whether they did."""
        width, height = self.size
        dark = self.app.current_theme.dark
        if self.spec is None or width <= 0 or height <= 1:
            changed = bool(self._strips)
            self._cache_key, self._strips = (width, height, None, dark), []
            return changed
        lines = [self.legend(self.palette(), width)]
        plot_height = height - 1
        if width < 8 or plot_height < 3:
            key: tuple = (width, height, dark, lines[0].text, "small")
            if key == self._cache_key:
                return False
            lines += render_chart(self.spec, width, plot_height, glyphs=self.glyphs,
                                  shapes=self.shapes)
        else:
            plot = plot_layout(self.spec, width, plot_height)
            key = (width, height, dark, lines[0].text, self.glyphs.name, self.shapes,
                   plot.key)
            if key == self._cache_key:
                return False
            styles = ChartStyles(axis=Style(dim=True), now=Style(bold=True),
                                 cursor=Style(reverse=True, bold=True))
            lines += draw_plot(plot, self.spec, self.palette(), styles,
                               glyphs=self.glyphs, shapes=self.shapes)
        base = self.rich_style
        self._cache_key = key
        self._strips = [strip.apply_style(base) for strip in lines]
        return True

    def strips(self) -> list[Strip]:
        width, height = self.size
        if self._cache_key is None or self._cache_key[:3] != (
                width, height, self.app.current_theme.dark):
            self.draw()
        return self._strips

    def legend(self, palette: dict[str, Style], width: int) -> Strip:
        """One line naming each trace drawn: solid lines are readings, dashed are plans (or,
        drawn by shape, each trace's own mark).

        The longest wording that fits the width: a legend cut off mid-word names nothing."""
        assert self.spec is not None
        glyphs, shapes = self.glyphs, self.shapes
        roles: list[tuple[str, bool]] = []
        for trace in self.spec.traces:
            if trace.role not in [role for role, _ in roles]:
                roles.append((trace.role, trace.dashed))
        markers = [m for m, shown in ((f"{glyphs.now} now", self.spec.now is not None),
                                      (f"{glyphs.cursor} cursor", self.spec.cursor is not None))
                   if shown]
        wordings = [(LEGEND_NAMES, 2, "  ", markers), (SHORT_LEGEND_NAMES, 1, " ", markers),
                    (SHORT_LEGEND_NAMES, 1, " ", [])]
        for names, mark_width, gap, shown in wordings:
            segments = [Segment(" ")]
            for role, dashed in roles:
                mark = (glyphs.mark(role) if shapes else
                        glyphs.dashed if dashed else glyphs.solid) * mark_width
                segments += [Segment(mark, palette.get(role)),
                             Segment(f" {names.get(role, role)}{gap}")]
            segments += [Segment(f"{m}{gap}", Style(bold=True)) for m in shown]
            strip = Strip(segments)
            if strip.cell_length <= width:
                break
        return strip.crop_extend(0, width, None)

    def render_line(self, y: int) -> Strip:
        strips = self.strips()
        if 0 <= y < len(strips):
            return strips[y]
        return Strip.blank(self.size.width, self.rich_style)
