"""The what-if's array forms of the engine's rules decide exactly as the engine does.

Each run below is the engine's own per-sample rules (RunRules) driving the in-process
simulator with one of its faults, every sample and event written to a real SQLite run log
as the live engine writes them (flags included). Over the logged samples the rules then run
twice, one sample at a time and as arrays (tuikiln.engine.stepper_arrays, alarm_arrays),
and must agree on every step, state, setpoint, step start and end, alarm (raised and cleared,
at the same sample, with the same words) and outcome; the alarms must also be the ones the
engine itself raised while the run went on. The numbers in the profiles are invented for
the tests (not heat treatments).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs

from tests.test_hostile_files import examples
from tests.trials import trials
from tuikiln import events as ev
from tuikiln.analysis.replay import Trace
from tuikiln.analysis.whatif import rerun_rules
from tuikiln.engine import checks
from tuikiln.engine import states as st
from tuikiln.engine.rules import RunRules, TickInput
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog
from tuikiln.simulator import Fault, LoadConfig, SimConfig, SimulatedKiln

START_T = 1_700_000_000.0

EVERY_KIND = """
name = "Test: rated ramp, max ramp, hold, rated cool, free cool"
units = "C"
about = "Invented for a test."

[limits]
band = 15

[[step]]
ramp = "900/h"
to = 300

[[step]]
ramp = "max"
to = 480

[[step]]
hold = "40m"

[[step]]
cool = "300/h"
to = 400

[[step]]
cool = "free"
to = 380
"""

TIGHT = """
name = "Test: a tight overshoot limit"
units = "C"
about = "Invented for a test: an overshoot limit this tight trips on the oven's own swing."

[limits]
overshoot = 0.5
band = 3

[[step]]
ramp = "max"
to = 450

[[step]]
hold = "20m"

[[step]]
cool = "free"
to = 300
"""

PAUSES = """[[step]]
pause = "Take the parts out, then acknowledge"

[[step]]
pause = "Put them back, then acknowledge"

"""
WITH_PAUSES = EVERY_KIND.replace('[[step]]\ncool = "300/h"', PAUSES + '[[step]]\ncool = "300/h"', 1)

# (name, profile, faults): the faults the issue names (overshoot, lost thermocouple, stuck
# heater, hold out of band) and the link and element faults besides.
RUNS = [
    ("clean", EVERY_KIND, ()),
    ("overshoot", TIGHT, ()),
    ("lost thermocouple", EVERY_KIND, (Fault("tc-open", 1500.0),)),
    ("stuck heater", EVERY_KIND, (Fault("relay-welded", 3000.0),)),
    ("door open in the hold", EVERY_KIND, (Fault("door-open", 2400.0, 400.0),)),
    ("link drops", EVERY_KIND, (Fault("link-drop", 900.0, 60.0), Fault("link-drop", 2400.0,
                                                                       200.0))),
    ("element fails", EVERY_KIND, (Fault("element-open", 600.0),)),
    ("noisy line", TIGHT, (Fault("line-noise", 300.0, 900.0, share=0.3),)),
    ("pauses", WITH_PAUSES, (Fault("door-open", 2400.0, 400.0),)),  # two, answered late
]


def record(log: RunLog, text: str, faults: tuple[Fault, ...], seed: int,
           limit_s: float = 20_000.0, answer_after_s: float = 240.0) -> int:
    """The engine's rules on the simulator, logged as tuikiln.engine.runner logs; a person
    answers each pause step `answer_after_s` after it asks."""
    profile = parse_profile(text, "test.toml")
    rules = RunRules(profile, Limits().merged(profile.limits), max_c=1000.0)
    kiln = SimulatedKiln(SimConfig(load=LoadConfig(), load_thermocouple=False,
                                   faults=faults), seed=seed)
    kiln.set_running(True)
    rec = log.start_run(kiln="Simulated bench oven", profile=profile.name, started=START_T,
                        profile_text=text, units="C", device="sim", speed="max")
    now = START_T
    asked: float | None = None
    while not rules.ended and now - START_T < limit_s:
        if rules.stepper.waiting_for_operator:
            asked = now if asked is None else asked
            if now - asked >= answer_after_s:
                for event in rules.command(now, "ack", None, "test").events:
                    rec.event(event)
        else:
            asked = None
        r = kiln.read()
        chamber = r.chamber_c if r.line_answers else None
        decision = rules.tick(now, TickInput(chamber, None, r.output_pct if r.line_answers
                                             else None, r.line_answers, r.sensor_fault))
        for event in decision.events:
            rec.event(event)
        flags = ((st.FLAG_SENSOR_FAULT if r.sensor_fault and r.line_answers else 0)
                 | (0 if r.line_answers else st.FLAG_NO_READING))
        rec.sample(now, chamber, None, rules.core_c, rules.stepper.setpoint_c,
                   r.output_pct if r.line_answers else None,
                   min(rules.stepper.index, len(profile.steps) - 1),
                   st.STATE_CODE.get(rules.stepper.state, 0), flags)
        if decision.setpoint_c is not None:
            kiln.set_setpoint(decision.setpoint_c)
        kiln.advance(1.0)
        now += 1.0
    rec.end(rules.outcome or st.UNFINISHED, now)
    rec.close()
    return rec.run_id


@pytest.fixture(scope="module")
def logged(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[RunLog, int]]:
    log = RunLog(Path(tmp_path_factory.mktemp("whatif")) / "runs.sqlite")
    return {name: (log, record(log, text, faults, seed=3 + i))
            for i, (name, text, faults) in enumerate(RUNS)}


def _alarms(events: list) -> list[tuple]:
    return [(e["time"], e["kind"], e["detail"]["alarm"], e["message"]) for e in events
            if e["kind"] in (ev.ALARM_RAISED, ev.ALARM_CLEARED)]


def _steps(events: list) -> list[tuple]:
    return [(e["time"], e["kind"], e["message"], sorted(e["detail"].items())) for e in events
            if e["kind"] in (ev.STEP_START, ev.STEP_END)]


def _both(log: RunLog, run_id: int, limits: Limits | None = None):  # noqa: ANN202
    info = log.run(run_id)
    assert info is not None
    profile = parse_profile(info.profile_text, "stored")
    limits = limits or Limits().merged(profile.limits)
    trace = Trace.from_samples(log.samples(run_id), info.started)
    kwargs = {"flags": trace.flags, "max_c": 1000.0, "events": log.events(run_id)}
    one = rerun_rules(trace.t, trace.chamber_c, trace.load_c, trace.output_pct, profile,
                      limits, per_sample=True, **kwargs)
    many = rerun_rules(trace.t, trace.chamber_c, trace.load_c, trace.output_pct, profile,
                       limits, **kwargs)
    return one, many


def _assert_same(one, many) -> None:  # noqa: ANN001
    assert (one.how, many.how) == ("per sample", "arrays")
    np.testing.assert_array_equal(many.step, one.step)
    np.testing.assert_array_equal(many.state, one.state)
    np.testing.assert_array_equal(many.setpoint_c, one.setpoint_c)
    assert _alarms(many.events) == _alarms(one.events)
    assert _steps(many.events) == _steps(one.events)
    assert (many.outcome, many.end_reason, many.ended_at) == (
        one.outcome, one.end_reason, one.ended_at)


@pytest.mark.parametrize("name", [r[0] for r in RUNS])
def test_arrays_decide_as_the_engine(logged, name: str) -> None:  # noqa: ANN001
    log, run_id = logged[name]
    one, many = _both(log, run_id)
    _assert_same(one, many)
    # ... and as the engine did while the run went on (the same rules, live).
    engine = [(e["time"], e["kind"], e["detail"]["alarm"]) for e in log.events(run_id)
              if e["kind"] in (ev.ALARM_RAISED, ev.ALARM_CLEARED)]
    assert [a[:3] for a in _alarms(many.events)] == engine
    info = log.run(run_id)
    assert info is not None and (many.outcome or st.UNFINISHED) == info.outcome


def test_the_faults_do_raise_their_alarms(logged) -> None:  # noqa: ANN001
    """The equality above is not of empty lists: each fault run raises its alarm."""
    raised = {name: {a[2] for a in _alarms(_both(*logged[name])[1].events)
                     if a[1] == ev.ALARM_RAISED} for name, _, _ in RUNS}
    assert raised["clean"] == set()
    assert "too-hot" in raised["overshoot"]
    assert "sensor-bad" in raised["lost thermocouple"]
    assert "heat-stuck-on" in raised["stuck heater"]
    assert "hold-slipped" in raised["door open in the hold"]
    assert {"no-link", "no-link-too-long"} <= raised["link drops"]
    assert raised["element fails"] & {"no-rise", "lagging", "never-reached"}


@pytest.mark.parametrize("overrides", [
    {"band": 2.0}, {"overshoot": 1.0}, {"hold_grace": 10.0, "band": 4.0},
    {"stall_for": 120.0, "behind": 5.0, "behind_for": 60.0}, {"runaway": 3.0},
    {"reach_within": 300.0}, {"link_lost": 5.0, "link_lost_safe": 1e6},
])
def test_arrays_agree_with_other_thresholds(logged, overrides: dict) -> None:  # noqa: ANN001
    """What-if is for other thresholds: every run, held against tighter limits."""
    for name, _, _ in RUNS:
        log, run_id = logged[name]
        info = log.run(run_id)
        assert info is not None
        limits = Limits().merged(parse_profile(info.profile_text, "x").limits).merged(overrides)
        _assert_same(*_both(log, run_id, limits))


@pytest.fixture
def straining() -> Iterator[None]:
    from tests.examples import straining_check  # the toy check of docs/CONTRIBUTING.md

    checks.alarm_check(straining_check.Straining)
    yield
    checks.forget("straining")


def test_registered_checks_are_judged_alike(logged, straining, monkeypatch) -> None:  # noqa: ANN001
    """A check registered in engine/checks has no array form: its own object judges the
    ticks the arrays describe, and says what it says per sample."""
    from tests.examples import straining_check

    monkeypatch.setattr(straining_check, "STRAINING_FOR_S", 60.0)  # the door is open 400 s
    raised = set()
    for name, _, _ in RUNS:
        one, many = _both(*logged[name])
        _assert_same(one, many)
        raised |= {a[2] for a in _alarms(many.events) if a[1] == ev.ALARM_RAISED}
    assert "straining" in raised


@pytest.mark.parametrize("change", ["equalized hold", "a command", "time back"])
def test_what_the_arrays_cannot_follow_goes_per_sample(logged, change: str) -> None:  # noqa: ANN001
    """An `equalized` hold waits for the per-sample detector, a logged command acts at its
    moment, a log whose times go back is not in order: those go to RunRules one sample at a
    time."""
    log, run_id = logged["clean"]
    info = log.run(run_id)
    assert info is not None
    text = info.profile_text
    trace = Trace.from_samples(log.samples(run_id), info.started)
    events = log.events(run_id)
    t = trace.t.copy()
    if change == "equalized hold":
        text = text.replace('hold = "40m"', 'hold = "40m"\nstart = "equalized"')
    elif change == "a command":
        events = [*events, {"time": float(t[100]), "kind": ev.COMMAND, "message": "Paused",
                            "severity": "info", "detail": {"name": "pause"}}]
    else:
        t[50], t[51] = t[51], t[50]
    profile = parse_profile(text, "changed.toml")
    result = rerun_rules(t, trace.chamber_c, trace.load_c, trace.output_pct, profile,
                         Limits().merged(profile.limits), flags=trace.flags, events=events)
    assert result.how == "per sample"


# Random profiles (tests/trials.py: any order of max and rated ramps, holds with or without
# their own band, rated and free cools, from room to near the kiln's maximum), each with a
# random seed and perhaps a fault; pauses answered after a random wait. `equalized` holds
# become `reached` ones, since those runs go per sample anyway (the test above).
ARRAY_FAULTS = [(), (Fault("tc-open", 2000.0),), (Fault("relay-welded", 1500.0),),
                (Fault("door-open", 1800.0, 300.0),), (Fault("link-drop", 1200.0, 150.0),),
                (Fault("element-open", 900.0),)]


@settings(max_examples=examples(12), deadline=None, database=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(trial=trials(max_steps=5), fault=hs.sampled_from(ARRAY_FAULTS),
       tight=hs.sampled_from([{}, {"band": 3.0, "hold_grace": 20.0}, {"overshoot": 1.0}]))
def test_arrays_decide_as_the_engine_on_random_profiles(tmp_path_factory, trial, fault,  # noqa: ANN001
                                                        tight: dict) -> None:
    trial.steps = [dict(s, start="reached") if "hold" in s else s for s in trial.steps]
    log = RunLog(Path(tmp_path_factory.mktemp("random")) / "runs.sqlite")
    try:
        run_id = record(log, trial.toml(), fault, seed=trial.seed, limit_s=8000.0,
                        answer_after_s=float(trial.seed % 400))
        profile = parse_profile(trial.toml(), "trial.toml")
        _assert_same(*_both(log, run_id, Limits().merged(profile.limits).merged(tight)))
    finally:
        log.close()
