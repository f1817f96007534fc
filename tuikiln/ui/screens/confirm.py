"""Ask before something that cannot be undone (skip a step, abort a run, start a run)."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from tuikiln.ui.glyphs import BRAILLE_GLYPHS


class ConfirmScreen(ModalScreen[bool]):
    """A question answered with y (yes) or n / Escape (no)."""

    DEFAULT_CSS = """
    ConfirmScreen { align: center middle; }
    ConfirmScreen > Vertical {
        width: 70; max-width: 95%; height: auto; max-height: 90%;
        border: thick $warning; background: $surface; padding: 1 2;
    }
    /* Long details scroll, so the y/n line stays on screen even at 80x24. */
    ConfirmScreen #confirm-scroll { height: auto; max-height: 55vh; }
    ConfirmScreen #confirm-keys { margin-top: 1; text-style: bold; }
    """

    BINDINGS = [
        Binding("y", "answer(True)", "Yes"),
        Binding("n,escape", "answer(False)", "No"),
    ]

    def __init__(self, question: str, details: str = "", yes: str = "yes") -> None:
        super().__init__()
        self.question = question
        self.details = details
        self.yes = yes

    def compose(self) -> ComposeResult:
        plain = getattr(self.app, "glyphs", BRAILLE_GLYPHS).plain
        with Vertical():
            yield Static(plain(self.question), id="confirm-question", markup=False)
            if self.details:
                with VerticalScroll(id="confirm-scroll"):
                    yield Static(plain(self.details), id="confirm-details", markup=False)
            yield Static(f"[y] {self.yes}    [n] no, go back", id="confirm-keys", markup=False)

    def action_answer(self, answer: bool) -> None:
        self.dismiss(answer)
