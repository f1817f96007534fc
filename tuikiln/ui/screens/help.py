"""Every key of the screen below, with what it does, and a few words on the screen."""

from __future__ import annotations

from collections.abc import Callable

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen, Screen
from textual.widgets import Static

from tuikiln.ui.glyphs import BRAILLE_GLYPHS

SAFETY = ("tuikiln is not a safety device: the oven needs an independent over-temperature "
          "limit. Quench oil is a fire hazard: keep a lid and an extinguisher at hand.")


def key_table(screen: Screen, plain: Callable[[str], str] = str) -> Text:
    """Each key of `screen` and what it does, one a line (plain text: no colour needed)."""
    rows: list[tuple[str, str]] = []
    seen: set[str] = set()
    for binding in screen.BINDINGS:
        if not isinstance(binding, Binding) or binding.action in seen:
            continue
        seen.add(binding.action)
        keys = ", ".join(screen.app.get_key_display(Binding(k.strip(), "")) for k in
                         binding.key.split(","))
        # The footer has room for a word; the tooltip, where there is one, says it whole.
        rows.append((keys, binding.tooltip or binding.description or binding.action))
    width = max((len(keys) for keys, _ in rows), default=4) + 3
    text = Text("\n")
    for keys, words in rows:
        text.append(plain(keys).ljust(width), style="bold")
        text.append(plain(words) + "\n")
    return text


class HelpScreen(ModalScreen[None]):
    """Shown over any screen with ? or F1; any of Escape, q, ? closes it."""

    DEFAULT_CSS = """
    HelpScreen { align: center middle; }
    HelpScreen > VerticalScroll {
        width: 84; max-width: 98%; height: auto; max-height: 95%;
        border: thick $primary; background: $surface; padding: 0 2;
    }
    """

    BINDINGS = [Binding("escape,q,question_mark,f1", "close", "Close help")]

    def __init__(self, below: Screen, about: str) -> None:
        super().__init__()
        self.below = below
        self.about = about

    def compose(self) -> ComposeResult:
        plain = getattr(self.app, "glyphs", BRAILLE_GLYPHS).plain
        with VerticalScroll():
            yield Static(Text(plain(self.about), style="bold"))
            yield Static(key_table(self.below, plain))
            yield Static(Text("\nMouse: optional; every action has a key.  " + SAFETY,
                              style="dim"))
            yield Static(Text("Escape closes this help.", style="italic"))

    def action_close(self) -> None:
        self.dismiss(None)
