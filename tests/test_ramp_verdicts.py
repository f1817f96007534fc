"""Ramp verdicts tell the truth: a ramp whose chamber fell short of its target or its rate is
not plainly met, and says by how much; a ramp on an oven that never heated is missed.

The traces are invented (demo data) and written to a real run log file, as the engine writes
one. Thresholds are our own rules (tuikiln.analysis.replay): short of the target by more than
the band (8 °C by default), or below 80 % of the planned rate.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from tests.test_replay_figures import _replay, write_run
from tuikiln.engine import states as st

RAMP_THEN_HOLD = """
name = "ramp then hold"
units = "C"
[[step]]
ramp = "600/h"
to = 620
[[step]]
hold = "10m"
"""

SHORT_RAMP = """
name = "short ramp"
units = "C"
[[step]]
ramp = "600/h"
to = 220
[[step]]
hold = "10m"
"""


def _run(tmp_path: Path, profile: str, ramp_s: float, chamber_during_ramp, hold_c: float):
    """A ramp of `ramp_s` seconds (chamber from `chamber_during_ramp(t)`), then a 10-minute
    hold at `hold_c`, one sample a second."""
    t = np.arange(0.0, ramp_s + 600.0 + 1.0)
    step = np.where(t < ramp_s, 0, 1)
    chamber = np.where(step == 0, chamber_during_ramp(t), hold_c)
    state = np.where(step == 0, st.STATE_CODE[st.HEATING], st.STATE_CODE[st.HOLDING])
    log, run_id = write_run(tmp_path / "runs.sqlite", profile, t, chamber, None, step, state)
    return _replay(log, run_id).steps[0]


def test_a_ramp_that_followed_its_plan_is_met(tmp_path: Path) -> None:
    # 20 -> 620 °C at 600 °C/h: one hour, the chamber on the planned line.
    ramp = _run(tmp_path, RAMP_THEN_HOLD, 3600.0, lambda t: 20.0 + t / 6.0, 620.0)
    assert ramp.verdict == "met", ramp.reasons
    assert ramp.figures["short_of_target_c"] < 1.0


def test_a_ramp_that_ended_short_of_its_target_says_by_how_much(tmp_path: Path) -> None:
    # The setpoint reached 620 °C on time, the chamber only 500 °C at the step's end.
    ramp = _run(tmp_path, RAMP_THEN_HOLD, 3600.0, lambda t: 20.0 + t * 480.0 / 3600.0, 620.0)
    assert ramp.verdict == "met with remarks", ramp.reasons
    short = [r for r in ramp.reasons if "short of its target" in r]
    assert short and "120 °C short" in short[0], ramp.reasons
    assert "500 °C of 620 °C" in short[0]
    # 480 °C/h of 600 °C/h: 20 % slower is not yet "well below" (below 80 %)
    assert not [r for r in ramp.reasons if "slower" in r]


def test_a_ramp_well_below_its_rate_says_by_how_much(tmp_path: Path) -> None:
    # 20 -> 220 °C planned in 20 min at 600 °C/h; the chamber took 30 min (400 °C/h): 10 min
    # late is within behind_for (15 min), so only the rate tells.
    ramp = _run(tmp_path, SHORT_RAMP, 1800.0, lambda t: 20.0 + t * 200.0 / 1800.0, 220.0)
    assert ramp.verdict == "met with remarks", ramp.reasons
    slower = [r for r in ramp.reasons if "slower" in r]
    assert slower and "33 % slower" in slower[0], ramp.reasons
    assert not [r for r in ramp.reasons if "later than planned" in r]


def test_a_ramp_on_an_oven_that_never_heated_is_missed(tmp_path: Path) -> None:
    # The controller sat at 0 (the setpoint never reached it): the chamber stayed at room.
    ramp = _run(tmp_path, RAMP_THEN_HOLD, 3600.0, lambda t: 20.0 + 0.0 * t, 20.0)
    assert ramp.verdict == "missed", ramp.reasons
    never = [r for r in ramp.reasons if "never heated" in r]
    assert never and "600 °C short of 620 °C" in never[0], ramp.reasons
