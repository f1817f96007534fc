"""Tempering parameter and quench timing through the replay path, on synthetic run logs
written into a real SQLite run log (tuikiln.runlog.RunRecorder), checked against formulas."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from tuikiln.analysis.replay import Trace, replay_run
from tuikiln.analysis.temper import parameter
from tuikiln.engine import states as st
from tuikiln.events import Event
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog
from tuikiln.units import f_to_c

START = 1_700_000_000.0


def write_run(path: Path, profile_text: str, t: np.ndarray, chamber: np.ndarray,
              load: np.ndarray | None, step: np.ndarray, state: np.ndarray) -> tuple[RunLog, int]:
    """A run log as the engine writes one: samples plus a step-start and step-end per step."""
    log = RunLog(path)
    rec = log.start_run(kiln="test", profile="test", started=START, profile_text=profile_text)
    for i in range(t.size):
        rec.sample(START + float(t[i]), float(chamber[i]),
                   None if load is None else float(load[i]), None, float(chamber[i]), 50.0,
                   int(step[i]), int(state[i]), 0)
    for index in np.unique(step):
        at = t[step == index]
        rec.event(Event(START + float(at[0]), "step-start", "", "info", {"index": int(index)}))
        rec.event(Event(START + float(at[-1]), "step-end", "", "info", {"index": int(index)}))
    rec.end("completed", START + float(t[-1]))
    rec.close()
    return log, rec.run_id


def _replay(log: RunLog, run_id: int, **kwargs: object):  # noqa: ANN202
    info = log.run(run_id)
    assert info is not None
    profile = parse_profile(info.profile_text, "stored")
    return replay_run(Trace.from_samples(log.samples(run_id), info.started), profile, Limits(),
                      events=log.events(run_id), outcome=info.outcome, **kwargs)


TEMPER_F = """
name = "temper 2 h at 600 F"
units = "F"
[[step]]
ramp = "max"
to = 600
[[step]]
hold = "2h"
"""


def test_hollomon_jaffe_worked_value_isothermal(tmp_path: Path) -> None:
    # Hollomon & Jaffe (1945), P = T (C + log10 t), T in K, t in h: 2 h at 600 °F with C = 20
    # gives 588.71 K * (20 + 0.30103) = 11,951 K·h (worked by hand from the formula).
    temp_c = f_to_c(600.0)
    t = np.arange(0.0, 7201.0)
    chamber = np.full(t.size, temp_c)
    step = np.where(t < 1.0, 0, 1)
    state = np.where(step == 0, st.STATE_CODE[st.HEATING_FULL], st.STATE_CODE[st.HOLDING])
    log, run_id = write_run(tmp_path / "runs.sqlite", TEMPER_F, t, chamber, chamber, step, state)
    result = _replay(log, run_id)
    hold = result.temper["holds"][0]
    # An isothermal trace reproduces the formula exactly, for the temperature as logged (the
    # run log keeps readings to about 1e-5 °C, so that is not exactly 600 °F).
    logged_c = float(log.samples(run_id)["load_c"][0])
    assert hold["parameter"] == pytest.approx(parameter(logged_c, 2.0, 20.0), rel=1e-12)
    assert hold["parameter"] == pytest.approx(11_951, abs=1.0)
    assert hold["planned_parameter"] == pytest.approx(11_951, abs=1.0)
    assert result.steps[1].verdict == "met"
    from tuikiln.analysis.report import render_text

    text = render_text(result)
    assert "P = 11,951" in text and "C depends on the steel" in text


DOUBLE_F = """
name = "double temper"
units = "F"
[[step]]
ramp = "max"
to = 600
[[step]]
hold = "2h"
[[step]]
cool = "free"
to = 150
[[step]]
ramp = "max"
to = 600
[[step]]
hold = "2h"
[[step]]
cool = "free"
to = 150
"""


def test_double_temper_total(tmp_path: Path) -> None:
    # Two holds at one temperature add their times under the additive rule (temper.py's
    # combined_parameter): 2 h + 2 h at 600 °F is the P of 4 h, not twice the P of 2 h.
    hot, cold = f_to_c(600.0), 20.0
    pieces = [(0, hot, 0), (7200, hot, 1), (7201, cold, 2), (9000, cold, 2), (9001, hot, 3),
              (16201, hot, 4), (16202, cold, 5), (18000, cold, 5)]
    t = np.arange(0.0, 18001.0)
    chamber = np.interp(t, [p[0] for p in pieces], [p[1] for p in pieces])
    step = np.zeros(t.size, dtype=int)
    for start, _, index in pieces:
        step[t >= start] = index
    state = np.full(t.size, st.STATE_CODE[st.HOLDING])
    log, run_id = write_run(tmp_path / "runs.sqlite", DOUBLE_F, t, chamber, None, step, state)
    result = _replay(log, run_id)
    temper = result.temper
    assert len(temper["holds"]) == 2
    assert temper["planned_total"] == pytest.approx(parameter(hot, 4.0), rel=1e-9)
    # The logged trace adds two 1 s drops through the tempering range: a hair more than 4 h.
    assert temper["total"] == pytest.approx(parameter(hot, 4.0), rel=2e-4)
    logged_hot = float(log.samples(run_id)["chamber_c"][0])
    assert temper["total"] > parameter(logged_hot, 4.0)
    assert all(h["source"] == "chamber thermocouple" for h in temper["holds"])


HARDEN_C = """
name = "harden"
units = "C"
[[step]]
ramp = "max"
to = 850
[[step]]
hold = "10m"
[[step]]
pause = "Quench now"
[[step]]
cool = "free"
to = 100
"""


def test_t85_newtonian_cooling(tmp_path: Path) -> None:
    # Newton's law of cooling, T = Ta + (T0 - Ta) exp(-t / tau), gives the analytic
    # t8/5 = tau ln((800 - Ta) / (500 - Ta)) (EN 1011-2 defines t8/5 as 800 to 500 °C) and
    # the time to below 65 °C = tau ln((T0 - Ta) / (65 - Ta)).
    tau, ambient, hold_c = 30.0, 20.0, 850.0
    dt = 0.05
    t = np.arange(0.0, 600.0 + 400.0, dt)
    end = 600.0
    load = np.where(t <= end, hold_c, ambient + (hold_c - ambient) * np.exp(-(t - end) / tau))
    chamber = np.where(t <= end, hold_c, hold_c - 2.0)
    step = np.where(t < dt, 0, np.where(t <= end, 1, np.where(t <= end + 5.0, 2, 3)))
    state = np.full(t.size, st.STATE_CODE[st.HOLDING])
    log, run_id = write_run(tmp_path / "runs.sqlite", HARDEN_C, t, chamber, load, step, state)
    result = _replay(log, run_id)
    (quench,) = result.quench
    expected_t85 = tau * math.log((800.0 - ambient) / (500.0 - ambient))
    expected_below = tau * math.log((hold_c - ambient) / (65.0 - ambient))
    # Linear interpolation between 0.05 s samples: well within 0.01 s of the analytic value.
    assert quench["t8_5_s"] == pytest.approx(expected_t85, abs=0.01)
    assert quench["to_below_s"] == pytest.approx(expected_below, abs=0.1)


def test_no_load_thermocouple_says_so(tmp_path: Path) -> None:
    t = np.arange(0.0, 1200.0)
    chamber = np.where(t <= 600, 850.0, 850.0 - (t - 600))
    step = np.where(t < 1, 0, np.where(t <= 600, 1, np.where(t <= 605, 2, 3)))
    state = np.full(t.size, st.STATE_CODE[st.HOLDING])
    log, run_id = write_run(tmp_path / "runs.sqlite", HARDEN_C, t, chamber, None, step, state)
    (quench,) = _replay(log, run_id).quench
    assert quench["t8_5_s"] is None and "load thermocouple" in quench["reason"]
