"""The toy alarm check of tests/examples/straining_check.py, through the engine's own rules."""

from __future__ import annotations

import math
from collections.abc import Iterator

import pytest

from tuikiln import events as ev
from tuikiln.engine import checks
from tuikiln.engine import states as st
from tuikiln.engine.alarms import ALARMS, AlarmRules, Observation
from tuikiln.limits import Limits


@pytest.fixture
def straining() -> Iterator[None]:
    from tests.examples import straining_check  # registers the check on import

    checks.alarm_check(straining_check.Straining)  # again, for a second test in the session
    yield
    checks.forget("straining")  # other tests see the built-in alarms only


def hold(now: float, output_pct: float) -> Observation:
    # A real reading wobbles a little: one that never moves is a thermocouple fault.
    chamber = 820.0 + 0.2 * math.sin(now / 7.0)
    return Observation(now=now, chamber_c=chamber, output_pct=output_pct, setpoint_c=820.0,
                       target_c=820.0, step_kind="hold", step_state=st.HOLDING)


def run(rules: AlarmRules, outputs: list[tuple[float, float]]) -> list:
    events = []
    for now, output in outputs:
        events += rules.evaluate(hold(now, output))
    return events


def test_a_hold_at_full_power_warns_after_ten_minutes_and_clears(straining: None) -> None:
    assert ALARMS["straining"] == ("warning", "holding at full power")
    rules = AlarmRules(Limits(), units="F")
    full = [(float(t), 100.0) for t in range(0, 660, 5)]
    raised = [e for e in run(rules, full) if e.kind == ev.ALARM_RAISED]
    assert [e.detail["alarm"] for e in raised] == ["straining"]
    assert raised[0].time >= 600.0
    assert "1508 °F" in raised[0].message  # 820 °C in the run's units
    assert rules.critical() is None  # a warning: the run goes on
    cleared = run(rules, [(665.0, 60.0), (670.0, 60.0)])
    assert [e.kind for e in cleared] == [ev.ALARM_CLEARED]


def test_part_power_never_warns(straining: None) -> None:
    rules = AlarmRules(Limits())
    assert not run(rules, [(float(t), 70.0) for t in range(0, 3600, 5)])


def test_forgotten_checks_are_not_judged(straining: None) -> None:
    checks.forget("straining")
    assert "straining" not in ALARMS
    rules = AlarmRules(Limits())
    assert not run(rules, [(float(t), 100.0) for t in range(0, 900, 5)])
