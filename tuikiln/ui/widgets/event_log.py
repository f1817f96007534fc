"""The run's event log: steps, alarms, notes, commands, newest at the bottom."""

from __future__ import annotations

import time
from collections.abc import Mapping, Sequence
from typing import Any

from rich.text import Text
from textual.reactive import reactive
from textual.widgets import RichLog

from tuikiln.events import EventKind, Severity, event_text
from tuikiln.plaintext import plain
from tuikiln.ui.glyphs import BRAILLE_GLYPHS, Glyphs
from tuikiln.units import Units

SEVERITY_MARK: dict[str, str] = {Severity.CRITICAL: "✖", Severity.WARNING: "▲", Severity.INFO: "·"}
KIND_MARK: dict[str, str] = {EventKind.NOTE: "✎", EventKind.OPERATOR_NEEDED: "☛",
                             EventKind.STEP_START: "▶", EventKind.RUN_END: "■"}
SEVERITY_STYLE: dict[str, str] = {Severity.CRITICAL: "bold reverse", Severity.WARNING: "bold"}


def event_line(event: Mapping[str, Any], units: Units, started: float | None,
               glyphs: Glyphs = BRAILLE_GLYPHS) -> Text:
    """'+1h05 ▶ step 3: heat as fast as the oven goes to 1490 °F' (its symbols in what the
    terminal's font has: `glyphs`)."""
    when = float(event.get("time") or 0.0)
    if started is not None:
        minutes = int(max(0.0, when - started) // 60)
        stamp = f"+{minutes // 60}h{minutes % 60:02d}"
    else:
        stamp = time.strftime("%H:%M", time.localtime(when))
    severity = str(event.get("severity") or Severity.INFO)
    kind = str(event.get("kind") or "")
    mark = KIND_MARK.get(kind, SEVERITY_MARK.get(severity, "·"))
    if severity in (Severity.WARNING, Severity.CRITICAL):
        mark = SEVERITY_MARK[severity]
    style = SEVERITY_STYLE.get(severity, "")
    text = Text(f"{stamp:>6} {glyphs.plain(mark)} ", style="dim")
    # Its numbers in the screen's units (an older log's events: their stored words); plain:
    # a remote note's escape codes must not reach the terminal.
    text.append(glyphs.plain(plain(event_text(event, units))), style=style)
    return text


class EventLog(RichLog):
    """Holds the events it was given and redraws them all when the units change."""

    DEFAULT_CSS = """
    EventLog {
        height: 6;
        border-top: solid $primary 50%;
        scrollbar-size-vertical: 1;
    }
    """

    units: reactive[Units] = reactive("C")
    """Units the numbers in the events are shown in."""

    def __init__(self, *, id: str | None = None, started: float | None = None) -> None:
        super().__init__(id=id, wrap=True, markup=False, auto_scroll=True, max_lines=2000)
        self.started = started
        self._events: list[Mapping[str, Any]] = []

    def add_events(self, events: Sequence[Mapping[str, Any]]) -> None:
        for event in events:
            self._events.append(event)
            self.write(self._line(event))

    def _line(self, event: Mapping[str, Any]) -> Text:
        try:
            glyphs = getattr(self.app, "glyphs", BRAILLE_GLYPHS)
        except Exception:  # not in an app (a widget built on its own): the full set
            glyphs = BRAILLE_GLYPHS
        return event_line(event, self.units, self.started, glyphs)

    def watch_units(self) -> None:
        self.clear()
        for event in self._events[-2000:]:
            self.write(self._line(event))

    @property
    def lines_text(self) -> list[str]:
        return [self._line(e).plain for e in self._events]
