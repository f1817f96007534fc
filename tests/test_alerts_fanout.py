"""The fan-out isolates its sinks; the terminal sink prints a line per event."""

from __future__ import annotations

import io
import logging
from collections.abc import Mapping
from typing import Any

import pytest

from tuikiln import events as ev
from tuikiln.alerts import build_alerts
from tuikiln.alerts.fanout import AlertFanout, TerminalSink
from tuikiln.events import Event


class Recorder:
    def __init__(self) -> None:
        self.calls: list[tuple[str, Any]] = []

    def event(self, event: Event) -> None:
        self.calls.append(("event", event.kind))

    def state(self, state: Mapping[str, Any]) -> None:
        self.calls.append(("state", dict(state)))

    def reading(self, sample: Mapping[str, Any]) -> None:
        self.calls.append(("reading", dict(sample)))

    async def start(self) -> None:
        self.calls.append(("start", None))

    async def stop(self) -> None:
        self.calls.append(("stop", None))


class Broken(Recorder):
    def event(self, event: Event) -> None:
        raise RuntimeError("sink is broken")

    async def start(self) -> None:
        raise OSError("cannot start")

    async def stop(self) -> None:
        raise OSError("cannot stop")


async def test_a_broken_sink_is_logged_once_and_never_reaches_the_engine(
    caplog: pytest.LogCaptureFixture,
) -> None:
    good = Recorder()
    fanout = AlertFanout([Broken(), good])
    with caplog.at_level(logging.ERROR):
        await fanout.start()
        for n in range(3):
            fanout.event(Event(float(n), ev.NOTE, "x"))
        fanout.state({"a": 1})
        await fanout.stop()
    assert good.calls == [("start", None), ("event", ev.NOTE), ("event", ev.NOTE),
                          ("event", ev.NOTE), ("state", {"a": 1}), ("stop", None)]
    assert fanout.errors == 5
    logged = [r for r in caplog.records if "Broken" in r.getMessage()]
    assert len(logged) == 3  # event (once, not three times), start, stop


def test_terminal_sink_prints_a_line_and_rings_only_for_people() -> None:
    out = io.StringIO()
    sink = TerminalSink(out, bell=True, clock_format=lambda t: f"t={t:.0f}")
    sink.event(Event(1.0, ev.STEP_START, "Step 2: hold 15 min"))
    sink.event(Event(2.0, ev.ALARM_RAISED, "Overshoot: 1790 °F", "critical"))
    sink.event(Event(3.0, ev.OPERATOR_NEEDED, "Quench now", "warning"))
    assert out.getvalue().splitlines() == [
        "t=1    Step 2: hold 15 min",
        "\at=2 !! Overshoot: 1790 °F",
        "\at=3 !  Quench now",
    ]
    quiet = io.StringIO()
    TerminalSink(quiet).event(Event(2.0, ev.ALARM_RAISED, "Overshoot", "critical"))
    assert "\a" not in quiet.getvalue()


def test_terminal_sink_survives_a_closed_terminal() -> None:
    out = io.StringIO()
    out.close()
    TerminalSink(out).event(Event(1.0, ev.NOTE, "x"))


async def test_build_alerts_wires_the_sinks() -> None:
    out = io.StringIO()
    fanout = build_alerts(kiln_name="k", emit=lambda e: None, terminal=out)
    await fanout.start()
    fanout.event(Event(0.0, ev.RUN_END, "Run completed"))
    await fanout.stop()
    assert "Run completed" in out.getvalue()
