"""Alarms that cannot be missed: a full-width band, a symbol and capitals (no colour needed)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from rich.text import Text
from textual.reactive import reactive
from textual.widgets import Static

from tuikiln.ui.glyphs import BRAILLE_GLYPHS
from tuikiln.ui.words import alarm_line, safe_state_line
from tuikiln.units import Units


class AlarmBanner(Static):
    """Lists the active alarms, and first the engine still trying to turn the heat off after
    the run ended; hidden when there is neither."""

    DEFAULT_CSS = """
    AlarmBanner {
        display: none;
        height: auto;
        padding: 0 1;
        background: $error;
        color: $text;
        text-style: bold;
    }
    AlarmBanner.-active { display: block; }
    AlarmBanner.-seen { background: $warning 40%; text-style: none; }
    """

    alarms: reactive[Sequence[Mapping[str, Any]]] = reactive((), always_update=True)
    """Active alarms from the status object: code, severity, words, acknowledged, since."""
    safe_state: reactive[Mapping[str, Any] | None] = reactive(None, always_update=True)
    """The status's `safe_state` (None, or the engine retrying the safe state)."""
    units: reactive[Units] = reactive("C")
    """Units the alarm words are shown in."""

    def watch_alarms(self) -> None:
        self.show()

    def watch_safe_state(self) -> None:
        self.show()

    def watch_units(self) -> None:
        self.show()

    def show(self) -> None:
        alarms = list(self.alarms)
        lines = [safe_state_line(self.safe_state)] if self.safe_state else []
        lines += [alarm_line(alarm, self.units) for alarm in alarms]
        self.set_class(bool(lines), "-active")
        self.set_class(not self.safe_state and bool(alarms)
                       and all(a.get("acknowledged") for a in alarms), "-seen")
        glyphs = getattr(self.app, "glyphs", BRAILLE_GLYPHS)
        text = Text("\n".join(glyphs.plain(line) for line in lines))
        if text.plain != getattr(self, "_shown", None):  # an update costs a layout pass
            self._shown = text.plain
            self.update(text)
