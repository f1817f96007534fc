"""`tuikiln demo` in a real terminal (tmux at 100x30): the chart, the temperatures and the
step show; keys act; quitting leaves no process behind."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import uuid
from pathlib import Path

import pytest

from tests.waiting import alive, wait_until

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

    def press_until(self, key: str, *words: str, tries: int = 3, each_s: float = 15.0) -> str:
        """Send `key` until `words` show: a key that arrives while a screen is still being
        mounted on a loaded machine can find nothing focused yet. Only for keys that do
        nothing on the screen they lead to."""
        for attempt in range(tries):
            self("send-keys", "-t", "demo", key)
            try:
                return self.wait_for(*words, timeout=each_s)
            except AssertionError:
                if attempt == tries - 1:
                    raise
        raise AssertionError("unreachable")

    def wait_for(self, *words: str, timeout: float = 15.0) -> str:
        def shown() -> str | None:
            text = self.screen()
            return text if all(word in text for word in words) else None

        try:
            return wait_until(shown, timeout, f"{words} on screen")
        except AssertionError as exc:
            raise AssertionError(f"{exc}:\n{self.screen()}") from None


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
    # The readout and the event log are redrawn in turn: wait for both (the log's step line
    # in °C: 1200 °F = 649 °C, 900 °F/h = 500 °C/h).
    screen = tmux.wait_for("target  649 °C", "heating to 649 °C at 500°C/h")
    assert "°F" not in screen.replace("°C/°F", "")  # only the key name keeps both
    tmux("send-keys", "-t", "demo", "p")
    tmux.wait_for("PAUSED by you")
    tmux("send-keys", "-t", "demo", "r")
    tmux.wait_for("run: running")
    tmux("send-keys", "-t", "demo", "x")
    tmux.wait_for("Abort the run?", "[y] abort the run")
    tmux("send-keys", "-t", "demo", "n")
    # A q sent while the question is still closing would go to it, not to the live screen.
    wait_until(lambda: "Abort the run?" not in tmux.screen(), 15, "the question to close")
    tmux("send-keys", "-t", "demo", "q")
    wait_until(lambda: not alive(pid), 30, "the demo process to end after q")
    leftover = subprocess.run(["pgrep", "-f", f"--data {tmp_path}"], capture_output=True,
                              text=True).stdout.split()
    assert leftover == []


# ----- terminal fallbacks (issue 18): NO_COLOR, the Linux console, 80x24 -----

def tuikiln_command(words: str, env: str) -> str:
    return (f"cd {ROOT} && exec env -u COLUMNS -u LINES -u NO_COLOR -u TUIKILN_GLYPHS "
            f"{env} {sys.executable} -m tuikiln {words}")


def start(tmux: Tmux, tmp_path: Path, words: str, env: str = "", size: tuple = (80, 24)
          ) -> int:
    """Start `tuikiln WORDS` in a fresh pane of this size; the pane's process id."""
    tmux("new-session", "-d", "-s", "demo", "-x", str(size[0]), "-y", str(size[1]),
         tuikiln_command(words, env))
    return int(tmux("display-message", "-p", "-t", "demo", "#{pane_pid}").strip())


def braille_in(text: str) -> bool:
    return any(0x2800 <= ord(ch) <= 0x28FF for ch in text)  # Unicode "Braille Patterns"


def footer_words(screen_class: type) -> list[str]:
    """The words of every key the screen shows in its footer."""
    return [b.description for b in screen_class.BINDINGS if b.show]


def demo_words(tmp_path: Path) -> str:
    return f"demo --speed 300 --wait 0 --no-bell --data {tmp_path}"


def test_no_color_tells_lines_apart_by_shape_at_80x24(tmux: Tmux, tmp_path: Path) -> None:
    from tuikiln.ui.glyphs import BLOCK_MARKS
    from tuikiln.ui.screens.live import LiveScreen

    start(tmux, tmp_path, demo_words(tmp_path), env="NO_COLOR=1")
    # The legend shows each line's mark; the load and the plan ahead appear within seconds.
    screen = tmux.wait_for(f"{BLOCK_MARKS['chamber']} chamber", f"{BLOCK_MARKS['load']} load",
                           f"{BLOCK_MARKS['plan']} plan", "step 1 of 8", timeout=40.0)
    lines = screen.splitlines()
    chart = "\n".join(line[:48] for line in lines[2:18])
    assert BLOCK_MARKS["chamber"] in chart and BLOCK_MARKS["plan"] in chart
    assert not braille_in(screen)  # braille dots differ only by colour: drawn by mark
    footer = lines[-1]
    for words in footer_words(LiveScreen):  # every key of the live screen, at 80 columns
        assert words in footer, (words, footer)
    # A key the footer has no room for (the bell) is in the help, which the footer names.
    tmux("send-keys", "-t", "demo", "?")
    tmux.wait_for("Bell on/off", "Acknowledge the alarms or the pause")
    tmux("send-keys", "-t", "demo", "Escape")
    tmux("send-keys", "-t", "demo", "q")


def test_linux_console_draws_without_braille(tmux: Tmux, tmp_path: Path) -> None:
    from tuikiln.ui.glyphs import BLOCK_MARKS

    start(tmux, tmp_path, demo_words(tmp_path), env="TERM=linux")
    # "+0h00 >": the event log's step mark in the console's characters.
    screen = tmux.wait_for(f"{BLOCK_MARKS['chamber']} chamber", "step 1 of 8", "chamber ",
                           "+0h00 >", timeout=40.0)
    assert not braille_in(screen)
    console_font_has(screen)
    assert "╭" not in screen  # the big digits' rounded corners are not drawn there
    tmux("send-keys", "-t", "demo", "q")


def test_override_draws_braille_on_the_linux_console(tmux: Tmux, tmp_path: Path) -> None:
    start(tmux, tmp_path, demo_words(tmp_path) + " --glyphs braille", env="TERM=linux")
    screen = tmux.wait_for("━ chamber", "step 1 of 8", timeout=40.0)
    assert braille_in(screen)
    tmux("send-keys", "-t", "demo", "q")


def console_font_has(screen: str) -> None:
    """Every character on screen, the event log's included, is in code page 437, the
    character set of the Linux console's built-in font (from memory); Python's "cp437"
    codec is the table."""
    for line in screen.splitlines():
        try:
            line.encode("cp437")
        except UnicodeEncodeError as exc:
            raise AssertionError(f"{line[exc.start:exc.end]!r} in {line!r}") from None


@pytest.mark.parametrize("term", ["", "TERM=linux"], ids=["default", "linux-console"])
def test_every_screen_keys_at_80x24(tmux: Tmux, tmp_path: Path, term: str) -> None:
    from tests.test_replay_sim import SHORT_C, simulate_run
    from tuikiln.runlog import RunLog
    from tuikiln.ui.screens.home import HomeScreen
    from tuikiln.ui.screens.preview import PreviewScreen
    from tuikiln.ui.screens.replay import ReplayScreen

    log = RunLog(tmp_path / "runs.sqlite")
    simulate_run(log, SHORT_C, limit_s=1200.0)
    log.close()
    start(tmux, tmp_path, f"home --data {tmp_path}", env=term)

    def footer_has(screen_class: type, *also: str) -> str:
        screen = tmux.wait_for(*footer_words(screen_class), *also, timeout=40.0)
        footer = screen.splitlines()[-1]
        for words in footer_words(screen_class):
            assert words in footer, (words, footer)
        if term:
            console_font_has(screen)
        return screen

    footer_has(HomeScreen, "Recent runs")
    tmux.press_until("Enter", "total at least")  # the first profile's plan
    footer_has(PreviewScreen, "total at least")
    tmux("send-keys", "-t", "demo", "s")  # the long summary scrolls; its keys stay in view
    screen = tmux.wait_for("[y] start it", "[n] no, go back")
    if term:
        console_font_has(screen)
    tmux("send-keys", "-t", "demo", "n")
    # A key sent while the question is still closing would go to it, not to the preview.
    wait_until(lambda: "[n] no, go back" not in tmux.screen(), 15, "the question to close")
    footer_has(PreviewScreen)
    # q rather than Escape: an Escape followed at once by Tab reads as Alt+Tab.
    tmux("send-keys", "-t", "demo", "q")
    footer_has(HomeScreen, "Recent runs")
    # The replay screen by `tuikiln review` in the same pane (from home, Tab would race the
    # focus Textual gives back to the list the preview was opened from).
    tmux("respawn-pane", "-k", "-t", "demo", tuikiln_command(f"review last --data {tmp_path}",
                                                            term))
    footer_has(ReplayScreen, "Replay · run 1", "Verdicts")
    tmux("send-keys", "-t", "demo", "?")
    screen = tmux.wait_for("Escape closes this help")
    if term:
        console_font_has(screen)
    tmux("send-keys", "-t", "demo", "q")
    footer_has(ReplayScreen)
    tmux("send-keys", "-t", "demo", "q")
