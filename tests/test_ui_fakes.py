"""A scripted stand-in for the engine's side of a run, for the screen tests.

It writes a real SQLite run log (tuikiln.runlog, the engine's own recorder) and answers the
control commands the way the engine's contract says (status object, ack/pause/resume/skip/
abort/note). The screens read it through the same LogLink they use for a real engine.
No tests here: imported by tests/test_ui_*.py.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from tuikiln.events import DIFFERENCE, TEMPERATURE, Event, Said, say
from tuikiln.plan import plan_profile
from tuikiln.profile import load_profile
from tuikiln.runlog import RunLog
from tuikiln.ui.loglink import LogLink

ROOT = Path(__file__).resolve().parents[1]
DEMO_PROFILE = ROOT / "profiles" / "demo-harden-temper.toml"
T0 = 1_700_000_000.0

# An alarm as the engine says it: the numbers apart (1530 °F = 832.2 °C; 40 °F of
# difference is 22.2 K; °F = °C x 9/5 + 32, NIST SP 811 B.9), so a screen shows either units.
OVERSHOOT = say("chamber {t}, {d} above the target", t=(TEMPERATURE, (1530.0 - 32.0) / 1.8),
                d=(DIFFERENCE, 40.0 / 1.8))


class ScriptedEngine:
    """Drive with `advance(seconds)`; commands arrive through `command` like the socket's."""

    def __init__(self, data_dir: Path, profile_path: Path = DEMO_PROFILE) -> None:
        self.profile = load_profile(profile_path)
        self.plan = plan_profile(self.profile)
        self.log = RunLog.in_folder(data_dir)
        self.recorder = self.log.start_run(
            kiln="Test oven", profile=self.profile.name, started=T0,
            profile_path=str(profile_path), profile_text=self.profile.source, units="F",
            device="sim")
        self.run_id = self.recorder.run_id
        self.t = T0
        self.chamber_c = 20.0
        self.step = 0
        self.state = "running"
        self.step_state = "heating"
        self.alarms: list[dict[str, Any]] = []
        self.commands: list[tuple[str, str | None]] = []
        self.closed = False
        self.event("run-start", "Run started")

    def event(self, kind: str, message: str, severity: str = "info", **detail: Any) -> None:
        self.recorder.event(Event(self.t, kind, message, severity, detail, self.run_id))
        self.recorder.flush(force=True)

    def advance(self, seconds: float, rate_c_per_s: float = 0.2) -> None:
        target = self.plan.steps[self.step].to_c
        for _ in range(int(seconds)):
            self.t += 1.0
            if self.state == "running":
                self.chamber_c = min(target, self.chamber_c + rate_c_per_s)
            self.recorder.sample(self.t, self.chamber_c, self.chamber_c - 5.0, None, target,
                                 40.0, self.step, 1, 0)
        self.recorder.flush(force=True)

    def raise_alarm(self, code: str, words: str | Said, severity: str = "warning") -> None:
        """`words`: plain text (as an older log stores it) or Said (as the engine says it:
        the numbers kept apart, tuikiln.events)."""
        said = words if isinstance(words, Said) else None
        text = said.text("F") if said is not None else str(words)
        numbers = said.as_detail() if said is not None else {}
        self.alarms.append({"code": code, "severity": severity, "words": text,
                            "acknowledged": False, "since": self.t, **numbers})
        self.event("alarm-raised", text, severity, alarm=code, words=text, **numbers,
                   **({"words_template": said.template} if said is not None else {}))

    def enter_pause(self) -> None:
        self.step = 4
        self.step_state = "waiting-you"
        self.state = "waiting-for-you"
        self.event("operator-needed", "Quench: oil-quench the blade now, then acknowledge")

    # The engine's side of the contract -------------------------------------------------

    async def status(self) -> Mapping[str, Any] | None:
        if self.closed:
            return None
        step = self.plan.steps[self.step]
        return {
            "run": self.run_id, "kiln": "Test oven", "profile": self.profile.name,
            "units": "F", "state": self.state, "step": self.step,
            "step_count": len(self.plan.steps), "step_kind": step.kind,
            "step_state": self.step_state, "step_words": "",
            "chamber_c": self.chamber_c, "load_c": self.chamber_c - 5.0, "core_c": None,
            "setpoint_c": step.to_c, "target_c": step.to_c, "output_pct": 40.0,
            "equalization": None, "time_to_next_step_s": 600.0,
            "time_to_operator_s": 3600.0, "time_to_end_s": 4 * 3600.0,
            "alarms": [dict(a) for a in self.alarms], "time": self.t, "started": T0,
            "watch_only": False,
        }

    async def command(self, name: str, arg: str | None = None) -> tuple[bool, str]:
        self.commands.append((name, arg))
        if name == "ack":
            for alarm in self.alarms:
                alarm["acknowledged"] = True
            if self.step_state == "waiting-you":
                self.step, self.step_state, self.state = 5, "coasting", "running"
            return True, "acknowledged"
        if name == "pause":
            self.state = "paused"
            return True, "paused: the setpoint is held"
        if name == "resume":
            self.state = "running"
            return True, "resumed"
        if name == "skip":
            self.step += 1
            return True, f"skipped to step {self.step + 1}"
        if name == "abort":
            self.state = "ended"
            return True, "aborted: heating stopped"
        if name == "note":
            self.event("note", f"Note: {arg}", source="screen")
            return True, "note saved"
        return False, f"unknown command {name}"

    def close(self) -> None:
        self.closed = True

    def link(self) -> LogLink:
        return LogLink(self.log.path.parent, self.run_id, control=self)


def screen_text(screen: Any) -> str:
    """Every word a screen shows (statics, tables, the chart, the log), for assertions."""
    from textual.widgets import DataTable, Digits, Static

    from tuikiln.ui.chartdraw import strips_text
    from tuikiln.ui.widgets.chart import TemperatureChart
    from tuikiln.ui.widgets.event_log import EventLog

    parts: list[str] = []
    for widget in screen.query("*"):
        if not widget.display:
            continue
        if isinstance(widget, TemperatureChart):
            parts += strips_text(widget.strips())
        elif isinstance(widget, EventLog):
            parts += widget.lines_text
        elif isinstance(widget, Digits):
            parts.append(widget.value)
        elif isinstance(widget, DataTable):
            for row in range(widget.row_count):
                parts.append(" | ".join(str(c) for c in widget.get_row_at(row)))
        elif isinstance(widget, Static):
            content = widget.content
            parts.append(getattr(content, "plain", None) or str(content))
    return "\n".join(parts)


async def shown(pilot: Any, *words: str, screen: type | None = None,
                absent: tuple[str, ...] = (), timeout: float = 20.0) -> str:
    """The screen's text once it is a `screen` (when given) showing every one of `words` and
    none of `absent`: a test waits for what it is about to check, not a fixed pause."""
    from tests.waiting import eventually

    def ready() -> str | None:
        current = pilot.app.screen
        if screen is not None and not isinstance(current, screen):
            return None
        text = screen_text(current)
        if all(w in text for w in words) and not any(w in text for w in absent):
            return text or " "  # an empty screen that was all we waited for is still shown
        return None

    name = screen.__name__ if screen is not None else "the screen"
    wanted = ", ".join(repr(w) for w in words) or "itself"
    wanted += "".join(f", without {w!r}" for w in absent)
    return await eventually(ready, timeout, f"{name} to show {wanted}")
