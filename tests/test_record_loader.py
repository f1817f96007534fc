"""One loader for logs (issue 17, part 3): the review screen and `tuikiln replay` judge a run
with the same thresholds, the kiln's [alarms] included, and give the same verdict."""

from __future__ import annotations

import contextlib
import io
import json
from collections.abc import Callable
from pathlib import Path

from tuikiln.cli import main
from tuikiln.runlog import RUNLOG_NAME, RunLog
from tuikiln.ui.loglink import LogLink
from tuikiln.ui.runfeed import SampleBuffer
from tuikiln.ui.screens.replay import verdict_lines

# A ramp faster than the simulated oven can follow, then a pause: the ramp waits for the
# oven and finishes minutes late. The kiln's [alarms] make minutes late worth a remark (and
# the lagging alarm never fire), where the defaults would let 15 minutes pass.
PROFILE = """\
name = "Ramp then pause"
units = "C"
about = "Invented for a test: a ramp the oven cannot keep up with, a pause, a free cool."

[[step]]
ramp = "3000/h"
to = 300

[[step]]
pause = "Acknowledge"

[[step]]
cool = "free"
to = 60
"""
KILN = """\
name = "test oven"

[alarms]
behind = 500
behind_for = "1s"
"""


def test_screen_and_command_give_the_same_verdict(kiln_file: Callable[..., Path],
                                                  data_folder: Path) -> None:
    profile = kiln_file(PROFILE, "lag.toml")
    kiln = kiln_file(KILN)
    data = data_folder
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["--data", str(data), "--kiln", str(kiln), "run", str(profile),
                     "--headless", "--speed", "max", "--auto-continue"]) == 0
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["--data", str(data), "replay", "last", "--json"]) == 0
    command = json.loads(out.getvalue())
    assert command["limits"]["behind_for"] == 1.0  # the kiln's, not the default 900 s
    assert command["steps"][0]["verdict"] == "met with remarks"
    assert "later than planned" in command["steps"][0]["reasons"][0]

    log = RunLog(data / RUNLOG_NAME)
    try:
        link = LogLink(data, 1, log=log)
        header = link.info()
        samples = SampleBuffer()
        samples.append(link.read_samples(None))
        lines = verdict_lines(header, samples, link.read_events(0))
    finally:
        log.close()
    assert lines[0] == f"run: {command['verdict']}"
    for step in command["steps"]:
        assert any(line.endswith(f"{step['verdict']}: step {step['number']}"
                                 f"{'' if not step['label'] else ' (' + step['label'] + ')'}: "
                                 f"{step['description']}") for line in lines), (step, lines)
    assert any("later than planned" in line for line in lines)
