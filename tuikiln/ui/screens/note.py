"""Type a note for the run's log ("moved the blades to the plates at 14:05")."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Static


class NoteScreen(ModalScreen[str | None]):
    """Enter saves the note, Escape drops it."""

    DEFAULT_CSS = """
    NoteScreen { align: center middle; }
    NoteScreen > Vertical {
        width: 72; max-width: 95%; height: auto;
        border: thick $primary; background: $surface; padding: 1 2;
    }
    """

    BINDINGS = [Binding("escape", "cancel", "Drop the note")]

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static("A note for this run's log (Enter saves, Escape drops it):")
            yield Input(placeholder="e.g. blades into the oil at 14:05", id="note-text")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        self.dismiss(text or None)

    def action_cancel(self) -> None:
        self.dismiss(None)
