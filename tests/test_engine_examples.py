"""Every example profile runs to the end on the in-process simulator through
`tuikiln run --headless --speed max`, and the log holds every sample and event.

Each takes two or three seconds (hours of simulated oven time), so all run by default.
"""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import pytest

from tuikiln.cli import main
from tuikiln.runlog import RunLog

PROFILES = sorted((Path(__file__).parent.parent / "profiles").glob("*.toml"))


@pytest.mark.parametrize("profile", PROFILES, ids=lambda p: p.name)
def test_example_profile_completes_headless(data_folder, profile):
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(["run", str(profile), "--headless", "--speed", "max", "--auto-continue",
                     "--data", str(data_folder)])
    text = out.getvalue()
    assert code == 0, text
    assert "Run complete" in text and "Warning" not in text and "ALARM" not in text
    log = RunLog.in_folder(data_folder)
    run = log.runs()[-1]
    assert run.outcome == "completed"
    samples = log.samples(run.id)
    # One sample per simulated second from start to end.
    assert len(samples["t"]) == int(round(run.ended - run.started)) + 1
    kinds = [e["kind"] for e in log.events(run.id)]
    assert kinds[0] == "run-start" and kinds[-1] == "run-end"
    assert kinds.count("step-start") == kinds.count("step-end")
