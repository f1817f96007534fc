"""Logging configured once by the command line (tuikiln/logsetup.py): libraries' own lines
(pymodbus logs each timeout at ERROR) stay off the standard error below --log-level debug,
our own plain-words message is still there, and the level is checked like any option."""

from __future__ import annotations

import logging
import os
import subprocess
import sys
import warnings
from pathlib import Path

import pytest

from tests.test_drivers_probe import _kiln
from tuikiln import logsetup
from tuikiln.cli import main

ROOT = Path(__file__).resolve().parents[1]


def _probe_silent_device(tmp_path: Path, *options: str) -> subprocess.CompletedProcess[str]:
    """`tuikiln probe` on a real pseudo-terminal nobody answers: pymodbus times out."""
    master, slave = os.openpty()
    try:
        env = {k: v for k, v in os.environ.items() if k != logsetup.LEVEL_ENV}
        return subprocess.run(
            [sys.executable, "-m", "tuikiln", *options, "probe",
             "--kiln", str(_kiln(tmp_path, os.ttyname(slave))), "--count", "1"],
            capture_output=True, text=True, timeout=60, cwd=ROOT, env=env)
    finally:
        os.close(master)
        os.close(slave)


def test_a_silent_device_prints_our_line_and_no_library_line(tmp_path) -> None:
    done = _probe_silent_device(tmp_path)
    assert done.returncode == 1
    assert "no answer" in done.stderr
    assert "pymodbus" not in done.stderr.lower() and "Traceback" not in done.stderr


def test_debug_shows_the_library_lines(tmp_path) -> None:
    # The same exchange at debug: pymodbus's own lines appear, so the test above could fail.
    done = _probe_silent_device(tmp_path, "--log-level", "debug")
    assert done.returncode == 1
    assert "pymodbus" in done.stderr.lower()


def test_a_wrong_level_is_one_line_and_exit_1(capsys) -> None:
    with pytest.raises(SystemExit) as stopped:
        main(["--log-level", "loud", "check"])
    assert stopped.value.code == 1
    err = capsys.readouterr().err
    assert "invalid choice: 'loud'" in err and "Traceback" not in err


def test_configuring_twice_keeps_one_handler(capsys) -> None:
    logsetup.configure("info")
    logsetup.configure("info")
    ours = [h for h in logging.getLogger().handlers if getattr(h, "_tuikiln_handler", False)]
    assert len(ours) == 1
    logging.getLogger("tuikiln.test").info("once")
    logging.getLogger("pymodbus.logging").error("a library line")
    warnings.warn("a library warning", DeprecationWarning, stacklevel=1)
    err = capsys.readouterr().err
    assert err.count("once") == 1
    assert "a library line" not in err and "a library warning" not in err


def test_the_environment_sets_the_level_and_a_bad_word_falls_back(monkeypatch) -> None:
    monkeypatch.setenv(logsetup.LEVEL_ENV, "INFO")
    assert logsetup.chosen_level(None) == "info"
    assert logsetup.chosen_level("error") == "error"  # the option wins
    monkeypatch.setenv(logsetup.LEVEL_ENV, "chatty")
    assert logsetup.chosen_level(None) == "warning"


def test_screens_log_to_a_file_made_only_when_needed(tmp_path, capsys) -> None:
    path = logsetup.to_file(tmp_path / "data")
    assert not path.parent.exists()  # nothing logged yet: nothing made
    logging.getLogger("tuikiln.ui").warning("a screen's warning")
    assert "a screen's warning" in path.read_text(encoding="utf-8")
    assert "a screen's warning" not in capsys.readouterr().err  # the screen stays whole
    logsetup.configure("warning")


@pytest.fixture(autouse=True)
def _restore_logging():
    root = logging.getLogger()
    handlers, level = list(root.handlers), root.level
    yield
    for handler in [h for h in root.handlers if h not in handlers]:
        root.removeHandler(handler)
        handler.close()
    root.setLevel(level)
    logging.captureWarnings(False)
