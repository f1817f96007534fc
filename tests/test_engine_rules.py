"""The pure run rules (stepper, alarms, commands) against a first-order oven, no clock read.

Thresholds are tuikiln's own defaults (tuikiln/limits.py); the oven is drivers.fake's
FirstOrderOven. Invented numbers, chosen to make each rule's edge visible.
"""

from __future__ import annotations

import pytest

from tuikiln import events as ev
from tuikiln.drivers.fake import FirstOrderOven
from tuikiln.engine import states as st
from tuikiln.engine.rules import RunRules, TickInput
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile

RAMP_HOLD = """
name = "t"
units = "C"
[[step]]
ramp = "600/h"
to = 300
[[step]]
hold = "10m"
[[step]]
pause = "Quench now"
[[step]]
cool = "free"
to = 100
"""


def rules_for(text: str, **limits: float) -> RunRules:
    profile = parse_profile(text, "t.toml")
    return RunRules(profile, Limits().merged(limits), max_c=1000.0, load_watch=None)


def drive(rules: RunRules, oven: FirstOrderOven, seconds: float, t0: float = 0.0,
          reading=None) -> tuple[float, list]:
    """Tick once a second for `seconds`; returns (end time, all events)."""
    events = []
    t = t0
    while t < t0 + seconds and not rules.ended:
        tick = reading(t) if reading else TickInput(oven.temperature_c,
                                                    output_pct=oven.output_pct())
        decision = rules.tick(t, tick)
        events.extend(decision.events)
        if decision.setpoint_c is not None:
            oven.setpoint_c = decision.setpoint_c
        oven.advance(1.0)
        t += 1.0
    return t, events


def kinds(events) -> list[str]:
    return [e.kind for e in events]


def test_ramp_moves_the_setpoint_at_its_rate_from_the_start_temperature():
    rules = rules_for(RAMP_HOLD)
    oven = FirstOrderOven(tau_s=120.0)
    drive(rules, oven, 601)
    # 600 °C/h for 600 s from 20 °C: 120 °C (arithmetic).
    assert rules.stepper.setpoint_c == pytest.approx(120.0, abs=0.2)
    assert rules.stepper.state == st.HEATING


def test_hold_waits_for_the_band_then_counts_and_the_run_completes():
    rules = rules_for(RAMP_HOLD)
    oven = FirstOrderOven(tau_s=120.0)
    t, events = drive(rules, oven, 4000)
    assert ev.OPERATOR_NEEDED in kinds(events)
    assert rules.stepper.waiting_for_operator
    ack = rules.command(t, "ack")
    assert ack.ok and ev.OPERATOR_ACKNOWLEDGED in kinds(ack.events)
    t, more = drive(rules, oven, 20000, t)
    assert rules.outcome == st.COMPLETED
    hold_end = [e for e in events if e.kind == ev.STEP_END and e.detail["kind"] == "hold"][0]
    assert hold_end.detail["hold_clock_s"] == pytest.approx(600.0, abs=1.0)
    # No alarms on a clean run.
    assert ev.ALARM_RAISED not in kinds(events + more)


def test_hold_clock_stops_out_of_band_and_the_slip_alarm_follows_the_grace():
    rules = rules_for("""
units = "C"
[[step]]
ramp = "max"
to = 500
[[step]]
hold = "30m"
""", hold_grace=120.0)
    temps = {"c": 500.0}

    def reading(t: float) -> TickInput:
        return TickInput(temps["c"], output_pct=30.0)

    oven = FirstOrderOven()
    t, _ = drive(rules, oven, 300, reading=reading)
    assert rules.stepper.state == st.HOLDING
    clock_before = rules.stepper.hold_clock_s
    temps["c"] = 470.0  # 30 K low, band 8 K
    t, events = drive(rules, oven, 100, t, reading=reading)
    assert rules.stepper.state == st.SLIPPED
    assert rules.stepper.hold_clock_s == pytest.approx(clock_before, abs=1.0)
    assert "hold-slipped" not in rules.alarms.active  # within the 120 s grace
    t, events = drive(rules, oven, 60, t, reading=reading)
    assert "hold-slipped" in rules.alarms.active
    temps["c"] = 500.0
    # Back in band for the dwell (stepper.BAND_DWELL_S, 20 s) before the hold counts as back.
    t, events = drive(rules, oven, 30, t, reading=reading)
    assert "hold-slipped" not in rules.alarms.active
    assert ev.ALARM_CLEARED in kinds(events)
    assert rules.stepper.out_of_band_s == pytest.approx(160.0, abs=2.0)


def test_pause_step_reminds_every_pause_remind_until_acknowledged():
    rules = rules_for("""
units = "C"
[[step]]
pause = "Load the oven"
""", pause_remind=300.0)
    oven = FirstOrderOven()
    t, events = drive(rules, oven, 1000)
    needed = [e for e in events if e.kind == ev.OPERATOR_NEEDED]
    assert [round(e.time) for e in needed] == [0, 300, 600, 900]
    assert rules.run_state == st.RUN_WAITING
    rules.command(t, "ack")
    drive(rules, oven, 2, t)
    assert rules.outcome == st.COMPLETED


def test_run_pause_holds_the_setpoint_and_alerts_when_too_long():
    rules = rules_for(RAMP_HOLD, pause_too_long=600.0)
    oven = FirstOrderOven(tau_s=120.0)
    t, _ = drive(rules, oven, 300)
    assert rules.command(t, "pause").ok
    held = rules.stepper.setpoint_c
    assert not rules.command(t, "pause").ok  # already paused: refused, in words
    t, events = drive(rules, oven, 700, t)
    assert rules.stepper.setpoint_c == held
    assert rules.run_state == st.RUN_PAUSED
    assert "paused-too-long" in rules.alarms.active
    result = rules.command(t, "resume")
    assert result.ok and "paused-too-long" not in rules.alarms.active
    t, _ = drive(rules, oven, 10, t)
    assert rules.stepper.setpoint_c > held


def test_skip_moves_on_and_abort_asks_for_the_safe_state():
    rules = rules_for(RAMP_HOLD)
    oven = FirstOrderOven(tau_s=120.0)
    t, _ = drive(rules, oven, 10)
    result = rules.command(t, "skip")
    assert result.ok and rules.stepper.index == 1
    assert any(e.kind == ev.STEP_END and e.detail["skipped"] for e in result.events)
    rules.command(t, "abort")
    decision = rules.tick(t + 1, TickInput(oven.temperature_c))
    assert decision.ended and decision.outcome == st.ABORTED and decision.safe_reason


def test_note_and_unknown_commands():
    rules = rules_for(RAMP_HOLD)
    note = rules.command(0.0, "note", "door seal replaced")
    assert note.ok and note.events[0].kind == ev.NOTE
    assert note.events[0].detail["text"] == "door seal replaced"
    assert not rules.command(0.0, "note", "  ").ok
    assert not rules.command(0.0, "ack", "too-hot").ok  # no such alarm active


def test_overshoot_raises_too_hot_and_clears_with_its_cause():
    rules = rules_for(RAMP_HOLD, overshoot=15.0)
    temps = {"c": 20.0}
    oven = FirstOrderOven()

    def reading(t: float) -> TickInput:
        return TickInput(temps["c"], output_pct=0.0)

    t, _ = drive(rules, oven, 5, reading=reading)
    temps["c"] = 320.0  # 20 K over the ramp's target of 300
    t, events = drive(rules, oven, 5, t, reading=reading)
    assert "too-hot" in rules.alarms.active
    acked = rules.command(t, "ack", "too-hot")
    assert acked.ok and rules.alarms.active["too-hot"].acknowledged
    temps["c"] = 300.0
    t, events = drive(rules, oven, 5, t, reading=reading)
    assert "too-hot" not in rules.alarms.active


def test_sensor_fault_is_critical_and_ends_the_run_safe():
    rules = rules_for(RAMP_HOLD)
    oven = FirstOrderOven()
    t, _ = drive(rules, oven, 10)
    decision = None
    for i in range(5):
        decision = rules.tick(t + i, TickInput(None, sensor_fault=True))
        if decision.ended:
            break
    assert decision is not None and decision.ended
    assert decision.outcome == st.STOPPED_BY_ALARM
    assert "sensor-bad" in rules.alarms.active and decision.safe_reason


def test_impossible_jumps_count_as_a_sensor_fault():
    rules = rules_for(RAMP_HOLD)
    values = [100.0, 400.0, 100.0, 400.0, 100.0, 400.0]
    ended = False
    for i, value in enumerate(values):
        ended = rules.tick(float(i), TickInput(value, output_pct=50.0)).ended or ended
    assert "sensor-bad" in rules.alarms.active and ended


def test_link_lost_warns_then_clears_and_too_long_is_critical():
    rules = rules_for(RAMP_HOLD, link_lost=30.0, link_lost_safe=120.0)
    oven = FirstOrderOven()
    t, _ = drive(rules, oven, 10)
    t, events = drive(rules, oven, 40, t, reading=lambda _t: TickInput(None, link_ok=False))
    assert "no-link" in rules.alarms.active and not rules.ended
    t, events = drive(rules, oven, 5, t)
    assert "no-link" not in rules.alarms.active and not rules.ended
    t, events = drive(rules, oven, 130, t, reading=lambda _t: TickInput(None, link_ok=False))
    assert rules.ended and rules.outcome == st.STOPPED_BY_ALARM
    assert "no-link-too-long" in rules.alarms.active


def test_over_the_kiln_maximum_is_critical():
    rules = rules_for(RAMP_HOLD)
    for i in range(5):
        decision = rules.tick(float(i), TickInput(1010.0, output_pct=0.0))
    assert "over-kiln-max" in rules.alarms.active
    assert decision.ended and decision.outcome == st.STOPPED_BY_ALARM


def test_rising_with_the_output_off_is_heat_stuck_on():
    rules = rules_for(RAMP_HOLD)
    # Output off throughout, the temperature climbing 0.2 K/s: a welded relay.
    t = 0.0
    decision = None
    while t < 600 and not rules.ended:
        decision = rules.tick(t, TickInput(20.0 + 0.2 * t, output_pct=0.0))
        t += 1.0
    assert decision is not None and rules.ended
    assert "heat-stuck-on" in rules.alarms.active
    assert t <= 400  # within minutes, not hours


def test_falling_behind_a_ramp_raises_lagging_and_no_rise():
    rules = rules_for(RAMP_HOLD, behind=40.0, behind_for=300.0, stall_for=300.0)
    # The heater gives nothing: temperature flat at 20 °C (a little noise) at full output.
    t = 0.0
    while t < 1500:
        rules.tick(t, TickInput(20.0 + 0.1 * (int(t) % 2), output_pct=100.0))
        t += 1.0
    assert "lagging" in rules.alarms.active
    assert "no-rise" in rules.alarms.active
    assert not rules.ended  # warnings, not a reason to stop


def test_a_frozen_reading_while_heating_hard_is_a_sensor_fault():
    rules = rules_for(RAMP_HOLD)
    t = 0.0
    while t < 1300 and not rules.ended:
        rules.tick(t, TickInput(20.0, output_pct=100.0))
        t += 1.0
    assert "sensor-bad" in rules.alarms.active and rules.ended


def test_status_words_name_the_hold_in_plain_words():
    rules = rules_for(RAMP_HOLD)
    oven = FirstOrderOven(tau_s=60.0)
    t = 0.0
    while rules.stepper.state != st.HOLDING:
        t, _ = drive(rules, oven, 1, t)
    t, _ = drive(rules, oven, 120, t)
    words = rules.stepper.words()
    assert words.startswith("holding at 300 °C") and "of 10 min left" in words
