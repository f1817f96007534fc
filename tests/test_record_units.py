"""Units as data (issue 17, part 4): the review screen's verdicts in °F are written by the
analysis from its numbers, so a band stays a band ("± 14 °F"), never "± 46 °F"."""

from __future__ import annotations

import contextlib
import dataclasses
import io
from pathlib import Path

import pytest

from tuikiln import events as ev
from tuikiln.cli import main
from tuikiln.engine.alarms import AlarmRules, Observation
from tuikiln.engine.states import HOLDING
from tuikiln.events import DIFFERENCE, RATE, TEMPERATURE, event_text, format_number, say
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RUNLOG_NAME, RunLog
from tuikiln.ui.loglink import LogLink
from tuikiln.ui.runfeed import SampleBuffer
from tuikiln.ui.screens.replay import verdict_lines
from tuikiln.ui.widgets.event_log import event_line
from tuikiln.units import symbol

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


def test_numbers_in_words_keep_a_band_a_band() -> None:
    """Units as data: a difference converts by 9/5 without the 32-degree offset, its sign is
    its own (the words never add one), in °F and in °C."""
    band = say("at {target} ± {band}", target=(TEMPERATURE, 150.0), band=(DIFFERENCE, 8.0))
    # 150 °C = 302 °F; 8 K = 14.4 °F of difference (NIST SP 811, B.9): never 46 °F or -9 °C.
    assert band.text("F") == "at 302 °F ± 14 °F"
    assert band.text("C") == "at 150 °C ± 8 °C"
    # 16 °F of difference is 8.9 K: "± 9 °C", not "± -9 °C" (16 °F as a temperature).
    nine = say("± {band}", band=(DIFFERENCE, 16.0 * 5.0 / 9.0))
    assert nine.text("C") == "± 9 °C" and nine.text("F") == "± 16 °F"
    for units in ("C", "F"):
        factor = 1.8 if units == "F" else 1.0
        for tenths in range(0, 2000, 7):
            kelvin = tenths / 10.0
            shown = say("± {d}", d=(DIFFERENCE, kelvin)).text(units)
            assert shown == f"± {round(kelvin * factor)} {symbol(units)}", shown
            # A drop a hair below zero rounds to 0, never "-0"; a real drop keeps one sign.
            assert format_number(DIFFERENCE, -kelvin / 1000.0, units).lstrip("-")[0] != "-"
        assert format_number(DIFFERENCE, -0.2, units) == f"0 {symbol(units)}"
    assert format_number(DIFFERENCE, -5.0, "F") == "-9 °F"  # -5 K is -9 °F of difference
    assert format_number(RATE, 100.0 / 3600.0, "F") == "180°F/h"  # 100 K/h = 180 °F/h


def _too_hot_event(units: str) -> dict:
    rules = AlarmRules(Limits(), None, units)  # type: ignore[arg-type]
    events = []
    for k in range(5):  # three readings in a row over the line raise it
        events += rules.evaluate(Observation(now=100.0 + k, chamber_c=830.0 + 0.1 * k,
                                             setpoint_c=800.0, target_c=800.0,
                                             step_kind="hold", step_state=HOLDING))
    raised = [e.as_dict() for e in events if e.kind == ev.ALARM_RAISED]
    assert len(raised) == 1
    return raised[0]


@pytest.mark.parametrize("logged_in", ["C", "F"])
def test_alarm_words_show_in_the_screens_units(logged_in: str) -> None:
    event = _too_hot_event(logged_in)
    # 830.2 °C = 1526 °F, 800 °C = 1472 °F (°F = °C × 9/5 + 32, NIST SP 811 B.9); the
    # 30.2 K it is over is 54 °F of difference, not 86 °F.
    assert event_text(event, "F") == "Warning: Too hot: 1526 °F is 54 °F above the target 1472 °F"
    assert event_text(event, "C") == "Warning: Too hot: 830 °C is 30 °C above the target 800 °C"
    assert event["message"] == event_text(event, logged_in)  # the stored words are the same
    line = event_line(event, "F" if logged_in == "C" else "C", None).plain
    assert ("°C" in line) != ("°F" in line)


def test_an_older_log_keeps_its_stored_words() -> None:
    old = {"kind": ev.ALARM_RAISED, "message": "Warning: Too hot: 1526 °F is 54 °F above",
           "detail": {"alarm": "too-hot", "words": "Too hot: 1526 °F is 54 °F above"}}
    assert event_text(old, "C") == old["message"]  # no numbers: shown as stored, not rewritten
    for hostile in ({"template": "{t.__class__}", "numbers": {"t": {"kind": "temperature",
                                                                    "value": 1.0}}},
                    {"template": "{missing}", "numbers": {}},
                    {"template": "{", "numbers": {}},
                    {"template": "{t:>99999}", "numbers": {"t": {"kind": "temperature",
                                                                 "value": 1.0}}},
                    {"template": "{t}", "numbers": {"t": {"kind": "temperature",
                                                          "value": "hot"}}},
                    {"template": "{t}", "numbers": {"t": {"kind": "colour", "value": 1.0}}},
                    {"template": 3, "numbers": []}):
        assert event_text({**old, "detail": hostile}, "C") == old["message"], hostile


def test_a_whole_run_shows_every_number_in_the_other_units(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A real run (the built-in simulator, a real SQLite log) whose tight overshoot limit
    raises an alarm: read back as the live screen reads it, every event with a temperature
    shows °F only, though the engine spoke °C."""
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))
    profile = tmp_path / "tight.toml"
    profile.write_text(PROFILE.format(target=205).replace(
        "[[step]]", "[limits]\novershoot = 0.5\n\n[[step]]", 1))
    data = tmp_path / "data"
    with contextlib.redirect_stdout(io.StringIO()):
        main(["--data", str(data), "run", str(profile), "--headless", "--speed", "max",
              "--auto-continue"])
    log = RunLog(data / RUNLOG_NAME)
    try:
        events = LogLink(data, 1, log=log).read_events(0)
    finally:
        log.close()
    kinds = {e["kind"] for e in events}
    assert ev.ALARM_RAISED in kinds and ev.STEP_START in kinds, kinds
    with_numbers = [e for e in events if "°" in str(e["message"])]
    assert with_numbers
    for event in with_numbers:
        shown = event_line(event, "F", None).plain
        assert "°F" in shown and "°C" not in shown and "± -" not in shown, shown
