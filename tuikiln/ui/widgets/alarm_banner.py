"""Alarms that cannot be missed: a full-width band, a symbol and capitals (no colour needed)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from rich.text import Text
from textual.reactive import reactive
from textual.widgets import Static

from tuikiln.ui.glyphs import BRAILLE_GLYPHS
from tuikiln.ui.words import alarm_line
from tuikiln.units import Units


class AlarmBanner(Static):
    """Lists the active alarms; hidden when there are none."""

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
    units: reactive[Units] = reactive("C")
    """Units the alarm words are shown in."""

    def watch_alarms(self) -> None:
        self.show()

    def watch_units(self) -> None:
        self.show()

    def show(self) -> None:
        alarms = list(self.alarms)
        self.set_class(bool(alarms), "-active")
        self.set_class(bool(alarms) and all(a.get("acknowledged") for a in alarms), "-seen")
        text = Text()
        for index, alarm in enumerate(alarms):
            if index:
                text.append("\n")
            text.append(getattr(self.app, "glyphs", BRAILLE_GLYPHS).plain(
                alarm_line(alarm, self.units)))
        if text.plain != getattr(self, "_shown", None):  # an update costs a layout pass
            self._shown = text.plain
            self.update(text)
