"""Replaying a run that is still going judges it so far: the step under way is "under way"
(how far it has got), the steps to come "not yet", and the run's verdict is "under way",
unless a step already missed (then "missed": a spoiled soak stays spoiled). Before, a going
run was called missed ("the run did not complete: running").

A real engine runs on a first-order oven and a manual clock into a real SQLite log; the
replay is the real `tuikiln replay` / `report` command reading that log from the same
process while the run goes on (its pid alive: the log says "running"). The rules are
tuikiln's own (a verdict is given for what has ended); no published source applies.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from tests.conftest import oven_settings
from tests.test_link_returns import HOT_HOLD
from tests.test_recovery import Sink
from tests.test_replay_sim import _replay, door_log  # noqa: F401 - a fixture
from tuikiln.analysis.replay import MET, MISSED, NOT_YET, UNDER_WAY, Trace, replay_run
from tuikiln.cli import main
from tuikiln.drivers.fake import FirstOrderOven, ManualClock, ScriptedDevice
from tuikiln.engine import states as st
from tuikiln.engine.runner import RunEngine
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

HEAT_HOLD_COOL = HOT_HOLD + """
[[step]]
cool = "free"
to = 100
"""


def screen_verdicts(data: str, run_id: int) -> list[str]:
    """The review screen's verdict lines for the run, read as the screen reads it."""
    from tuikiln.ui.loglink import LogLink
    from tuikiln.ui.runfeed import SampleBuffer
    from tuikiln.ui.screens.replay import verdict_lines

    link = LogLink(data, run_id)
    header = link.info()
    samples = SampleBuffer()
    samples.append(link.read_samples(None))
    return verdict_lines(header, samples, link.read_events(0), "C")


class ReplayMidHold(Sink):
    """Twenty minutes into the hold: `tuikiln replay --json` and `report` on the log, then
    an abort (a local command)."""

    def __init__(self, capsys: pytest.CaptureFixture[str], data: str, report: str) -> None:
        super().__init__()
        self.capsys, self.data, self.report = capsys, data, report
        self.seen: dict | None = None
        self.text = ""
        self.screen: list[str] = []

    def reading(self, sample) -> None:
        engine = self.engine
        stepper = engine.rules.stepper
        if self.seen is not None or stepper.index != 1 or stepper.state != st.HOLDING:
            return
        if stepper.hold_clock_s < 1200.0:
            return
        assert engine.recorder.flush()  # what a reader can see of the run now
        self.capsys.readouterr()
        assert main(["replay", "last", "--json", "--data", self.data]) == 0
        self.seen = json.loads(self.capsys.readouterr().out)
        assert main(["replay", "last", "--data", self.data]) == 0
        self.text = self.capsys.readouterr().out
        assert main(["report", "last", "-o", self.report, "--data", self.data]) == 0
        self.screen = screen_verdicts(self.data, engine.run_id)
        engine.command("abort", "enough", "socket")


async def test_a_going_run_is_under_way_not_missed(tmp_path, capsys) -> None:
    log = RunLog.in_folder(tmp_path)
    sink = ReplayMidHold(capsys, str(tmp_path), str(tmp_path / "run.html"))
    device = ScriptedDevice(model=FirstOrderOven(tau_s=300.0), clock=ManualClock(1.7e9))
    engine = RunEngine(device, parse_profile(HEAT_HOLD_COOL, "p.toml", max_c=1100.0),
                       oven_settings(tick_s=5.0), runlog=log, sinks=[sink])
    sink.engine = engine
    assert await engine.run() == st.ABORTED
    seen = sink.seen
    assert seen is not None, "the hold never ran 20 minutes"
    assert seen["outcome"] == st.RUN_RUNNING
    assert seen["verdict"] == UNDER_WAY
    assert seen["reasons"][0] == "the run is still going (step 2 of 3); judged so far"
    assert [s["verdict"] for s in seen["steps"]] == [MET, UNDER_WAY, NOT_YET]
    hold = seen["steps"][1]
    assert hold["reasons"][0].startswith("under way: 20m") and "of the 2h00m hold" in \
        hold["reasons"][0]
    assert not any("missed" in r or "log ends" in r for s in seen["steps"] for r in s["reasons"])
    assert "Verdict: UNDER WAY" in sink.text and "not yet" in sink.text
    html = (tmp_path / "run.html").read_text(encoding="utf-8")
    assert "under way" in html and 'class="going"' in html
    # The review screen judges it the same way (it read "run: missed" before).
    assert sink.screen[0] == f"run: {UNDER_WAY}", sink.screen
    assert not any("missed" in line for line in sink.screen), sink.screen
    # Once it has ended, the same log is judged as before: aborted mid-hold is a miss.
    capsys.readouterr()
    assert main(["replay", "last", "--json", "--data", str(tmp_path)]) == 0
    ended = json.loads(capsys.readouterr().out)
    assert ended["outcome"] == st.ABORTED and ended["verdict"] == MISSED
    assert [s["verdict"] for s in ended["steps"]] == [MET, MISSED, MISSED]


def test_a_miss_already_made_stays_a_miss_while_the_run_goes_on(door_log) -> None:  # noqa: F811
    """The door opened for 5 min in the soak (tests/test_replay_sim.py's simulated run): the
    soak is missed whether or not the run has ended; the cool after it is only under way."""
    log, _, faulty = door_log
    finished = _replay(log, faulty)
    assert finished.steps[1].verdict == MISSED
    info = log.run(faulty)
    samples = log.samples(faulty)
    cool_start = int(np.flatnonzero(samples["step"] == 2)[0])
    part = {name: column[: cool_start + 60] for name, column in samples.items()}  # 1 min in
    profile = parse_profile(info.profile_text, "stored")
    going = replay_run(Trace.from_samples(part, info.started), profile,
                       Limits().merged(profile.limits),
                       events=[e for e in log.events(faulty)
                               if e["time"] <= part["t"][-1] and e["kind"] != "run-end"],
                       outcome=st.RUN_RUNNING)
    assert going.verdict == MISSED
    assert [s.verdict for s in going.steps] == [MET, MISSED, UNDER_WAY]
    assert going.steps[1].reasons == finished.steps[1].reasons  # the same miss, the same words
    assert going.reasons[0].startswith("the run is still going (step 3 of 3)")
