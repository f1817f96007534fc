"""The footer of every screen: Textual's, made compact on narrow terminals so that each
screen's keys all fit at 80 columns (the keys' short words are chosen for that too)."""

from __future__ import annotations

from textual import events
from textual.widgets import Footer

COMPACT_BELOW = 100  # columns; a wider footer keeps Textual's roomier spacing


class KeyFooter(Footer):
    """Footer that drops its padding below COMPACT_BELOW columns."""

    def on_resize(self, event: events.Resize) -> None:
        self.compact = event.size.width < COMPACT_BELOW
