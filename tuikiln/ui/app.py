"""The Textual app: holds what every screen shares (units on show, the bell) and opens the
first screen the command asked for."""

from __future__ import annotations

from collections.abc import Callable

from textual.app import App
from textual.binding import Binding
from textual.reactive import reactive
from textual.screen import Screen
from textual.scrollbar import ScrollBar, ScrollBarRender

from tuikiln.ui.glyphs import Glyphs, choose_glyphs
from tuikiln.units import Units


class CellScrollBar(ScrollBarRender):
    """A scroll bar of whole cells, for a console font without the eighth blocks."""

    VERTICAL_BARS = [" "] * 8
    HORIZONTAL_BARS = [" "] * 8


class TuikilnApp(App[str]):
    """Runs one first screen; `leave(words)` goes back a screen or ends with those words."""

    CSS_PATH = "app.tcss"
    TITLE = "tuikiln"
    ENABLE_COMMAND_PALETTE = False

    units: reactive[Units] = reactive("C")
    """Units every screen shows temperatures in (u switches °C/°F)."""

    def __init__(self, first_screen: Callable[[], Screen], *, units: Units = "C",
                 bell: bool = True, glyphs: Glyphs | None = None) -> None:
        super().__init__()
        self.first_screen = first_screen
        self.bell_on = bell
        self.glyphs = glyphs or choose_glyphs()
        """Braille, block or ASCII characters (tuikiln.ui.glyphs); from --glyphs, else
        $TUIKILN_GLYPHS, else $TERM."""
        self._scrollbar_before = ScrollBar.renderer
        self.set_reactive(TuikilnApp.units, units)

    def on_mount(self) -> None:
        if not self.glyphs.braille:
            ScrollBar.renderer = CellScrollBar
        self.push_screen(self.first_screen())

    def on_unmount(self) -> None:
        ScrollBar.renderer = self._scrollbar_before

    def get_key_display(self, binding: Binding) -> str:
        # Textual names Enter and the arrows with symbols a console font may lack.
        return self.glyphs.plain(super().get_key_display(binding))

    def leave(self, words: str) -> None:
        """Leave the current screen: back to the one below, or out of the app."""
        if len(self.screen_stack) > 2:
            self.pop_screen()
            self.notify(words, timeout=6)
        else:
            self.exit(words)
