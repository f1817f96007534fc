"""Units as data (issue 17, part 4): the review screen's verdicts in °F are written by the
analysis from its numbers, so a band stays a band ("± 14 °F"), never "± 46 °F"."""

from __future__ import annotations

import contextlib
import dataclasses
import io
from pathlib import Path

from tuikiln.cli import main
from tuikiln.profile import parse_profile
from tuikiln.runlog import RUNLOG_NAME, RunLog
from tuikiln.ui.loglink import LogLink
from tuikiln.ui.runfeed import SampleBuffer
from tuikiln.ui.screens.replay import verdict_lines

PROFILE = """\
name = "Single temper"
units = "C"
about = "Invented for a test: a ramp, a 20 min hold and a free cool."

[[step]]
ramp = "600/h"
to = {target}

[[step]]
hold = "20m"

[[step]]
cool = "free"
to = 60
"""


def test_verdicts_in_fahrenheit_keep_a_band_a_band(tmp_path: Path, data_folder: Path) -> None:
    profile = tmp_path / "temper.toml"
    profile.write_text(PROFILE.format(target=205))
    data = data_folder
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["--data", str(data), "run", str(profile), "--headless", "--speed", "max",
                     "--auto-continue"]) == 0
    log = RunLog(data / RUNLOG_NAME)
    try:
        link = LogLink(data, 1, log=log)
        header = link.info()
        samples = SampleBuffer()
        samples.append(link.read_samples(None))
        events = link.read_events(0)
    finally:
        log.close()
    # Held against a hotter hold, the log is out of its band for the whole hold.
    hotter = parse_profile(PROFILE.format(target=225), "hotter.toml")
    shown = dataclasses.replace(header, profile=hotter)
    in_c = "\n".join(verdict_lines(shown, samples, events, "C"))
    in_f = "\n".join(verdict_lines(shown, samples, events, "F"))
    assert "the band is ± 8 °C" in in_c
    # 8 K is 14.4 °F of difference (a kelvin is 1.8 °F, NIST SP 811 B.9); 225 °C is 437 °F.
    assert "the band is ± 14 °F" in in_f and "437 °F" in in_f
    assert "°C" not in in_f and "± -" not in in_f and "± 46" not in in_f


def test_event_words_keep_a_band_a_band() -> None:
    from tuikiln.ui.runfeed import convert_temperatures

    # 8 K = 14.4 °F and 16 °F = 8.9 K of difference (NIST SP 811 B.9): never 46 °F or -9 °C.
    assert convert_temperatures("at 150 °C ± 8 °C", "F") == "at 302 °F ± 14 °F"
    assert convert_temperatures("± 16 °F", "C") == "± 9 °C"
