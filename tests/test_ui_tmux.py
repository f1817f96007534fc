"""`tuikiln demo` in a real terminal (tmux at 100x30): the chart, the temperatures and the
step show; keys act; quitting leaves no process behind."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
import uuid
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed")


class Tmux:
    def __init__(self) -> None:
        self.socket = f"tuikiln-test-{os.getpid()}-{uuid.uuid4().hex[:8]}"

    def __call__(self, *args: str) -> str:
        return subprocess.run(["tmux", "-L", self.socket, *args], capture_output=True,
                              text=True, timeout=10).stdout

    def screen(self) -> str:
        return self("capture-pane", "-p", "-t", "demo")

    def wait_for(self, *words: str, timeout: float = 15.0) -> str:
        deadline = time.monotonic() + timeout
        text = ""
        while time.monotonic() < deadline:
            text = self.screen()
            if all(word in text for word in words):
                return text
            time.sleep(0.2)
        raise AssertionError(f"{words} not on screen:\n{text}")


@pytest.fixture
def tmux(tmp_path: Path):
    t = Tmux()
    yield t
    subprocess.run(["tmux", "-L", t.socket, "kill-server"], capture_output=True)


def test_demo_in_a_real_terminal(tmux: Tmux, tmp_path: Path) -> None:
    # Do not redirect stderr: Textual draws on it.
    # COLUMNS/LINES from the test runner would override the pane size Textual sees.
    command = (f"cd {ROOT} && exec env -u COLUMNS -u LINES {sys.executable} -m tuikiln demo "
               f"--speed 120 --wait 0 --no-bell --data {tmp_path}")
    tmux("new-session", "-d", "-s", "demo", "-x", "100", "-y", "30", command)
    pid = int(tmux("display-message", "-p", "-t", "demo", "#{pane_pid}").strip())
    screen = tmux.wait_for("chamber", "step 1 of 8: ramp (preheat)", "heating to 1200 °F")
    assert "┤" in screen and "│ now" in screen  # the chart's axis and the now marker
    assert any(0x2800 < ord(ch) <= 0x28FF for ch in screen)  # braille traces
    assert "target  1200 °F" in screen and "next step" in screen
    assert "q Leave" in screen  # the footer names the keys
    tmux("send-keys", "-t", "demo", "u")
    screen = tmux.wait_for("target  649 °C")
    assert "°F" not in screen.replace("°C/°F", "")  # only the key name keeps both
    tmux("send-keys", "-t", "demo", "p")
    tmux.wait_for("PAUSED by you")
    tmux("send-keys", "-t", "demo", "r")
    tmux.wait_for("run: running")
    tmux("send-keys", "-t", "demo", "x")
    tmux.wait_for("Abort the run?", "[y] abort the run")
    tmux("send-keys", "-t", "demo", "n")
    tmux("send-keys", "-t", "demo", "q")
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            break
        time.sleep(0.1)
    else:
        raise AssertionError("the demo process is still there after q")
    leftover = subprocess.run(["pgrep", "-f", f"--data {tmp_path}"], capture_output=True,
                              text=True).stdout.split()
    assert leftover == []
