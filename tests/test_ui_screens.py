"""Home, profile preview, replay and help screens through Pilot, on real run logs; and a
run started from home with the real engine process, left going when its screen closes."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from tests.test_ui_fakes import DEMO_PROFILE, OVERSHOOT, ScriptedEngine, screen_text, shown
from tests.waiting import eventually
from tuikiln import control
from tuikiln.ui.app import TuikilnApp
from tuikiln.ui.launcher import Launcher
from tuikiln.ui.screens.confirm import ConfirmScreen
from tuikiln.ui.screens.help import HelpScreen
from tuikiln.ui.screens.home import HomeScreen
from tuikiln.ui.screens.live import LiveScreen
from tuikiln.ui.screens.preview import PreviewScreen
from tuikiln.ui.screens.replay import ReplayScreen

SIZE = (100, 30)


def past_run(data_dir: Path) -> ScriptedEngine:
    engine = ScriptedEngine(data_dir)
    engine.event("step-start", "Step 1 of 8 (preheat): heat at 900°F/h to 1200 °F", index=0)
    engine.advance(1200)
    engine.raise_alarm("overshoot", OVERSHOOT)
    engine.event("note", "Note: blade looks even", text="blade looks even")
    engine.advance(600)
    engine.recorder.end("aborted", engine.t)
    engine.recorder.flush(force=True)
    return engine


async def test_preview_shows_plan_table_total_and_open_steps() -> None:
    app = TuikilnApp(lambda: PreviewScreen(DEMO_PROFILE), units="F")
    async with app.run_test(size=SIZE) as pilot:
        text = await shown(pilot, "Profile: Demo: 1084 blade, harden and temper",
                           "open-ended step(s)", "ends at least")
        assert "Profile: Demo: 1084 blade, harden and temper" in text
        assert "heat at 900°F/h to 1200 °F" in text
        assert "wait for you: Quench" in text and "until you acknowledge" in text
        assert "open-ended step(s)" in text and "total at least" in text
        assert "…" in text  # open-ended steps are marked in the table
        assert "ends at least" in text  # the clock time if started now
        await pilot.press("u")
        celsius = await shown(pilot, "to 649 °C", absent=("°F",))
        assert "°F" not in celsius and "to 649 °C" in celsius
        await pilot.press("question_mark")
        await shown(pilot, "Start this run", screen=HelpScreen)
        assert isinstance(pilot.app.screen, HelpScreen)
        assert "Start this run" in screen_text(pilot.app.screen)
        await pilot.press("escape")
        assert isinstance(pilot.app.screen, PreviewScreen)


async def test_preview_lists_mistakes_with_lines(tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text('units = "F"\n\n[[step]]\nramp = "fast"\nto = 1500\n\n[[step]]\nhold = "x"\n')
    app = TuikilnApp(lambda: PreviewScreen(bad), units="F")
    async with app.run_test(size=SIZE) as pilot:
        text = await shown(pilot, "mistake(s) to fix", f"✖ {bad}:4: step 1:")
        assert "mistake(s) to fix" in text
        assert f"✖ {bad}:4: step 1:" in text  # file:line, plain words
        assert f"✖ {bad}:8: step 2: \"hold\" needs a duration" in text
        await pilot.press("s")  # cannot start a profile with mistakes
        await pilot.pause()  # the key handled (the app idle), not a fixed time
        assert isinstance(pilot.app.screen, PreviewScreen)


async def test_replay_cursor_readings_verdicts_and_notes(tmp_path: Path) -> None:
    engine = past_run(tmp_path)
    app = TuikilnApp(lambda: ReplayScreen(engine.link()), units="F")
    async with app.run_test(size=SIZE) as pilot:
        text = await shown(pilot, "Replay · run 1", "at +1s", "Verdicts", "blade looks even",
                           "▲ chamber 1530 °F, 40 °F above the target")
        assert "Replay · run 1" in text and "aborted" in text
        assert "at +1s" in text and "chamber  68.4 °F" in text  # the first sample: 20.2 °C
        assert "Verdicts" in text and "✖ missed: step 1 (preheat)" in text
        assert "did not finish: the run ended (aborted)" in text
        assert "blade looks even" in text and "WARNING" not in text  # log lines, not banner
        assert "▲ chamber 1530 °F, 40 °F above the target" in text
        await pilot.press("end")
        assert "at +30m" in await shown(pilot, "at +30m")
        await pilot.press("home", "shift+right")
        moved = await shown(pilot, "┃ cursor", absent=("at +1s",))
        assert "at +1s" not in moved and "┃ cursor" in moved
        await pilot.press("u")
        assert "chamber 832 °C, 22 °C above the target" in await shown(
            pilot, "chamber 832 °C, 22 °C above the target")


async def test_home_lists_kiln_profiles_and_runs(tmp_path: Path) -> None:
    past_run(tmp_path)
    launcher = Launcher(tmp_path, None)
    app = TuikilnApp(lambda: HomeScreen(launcher), units="F")
    async with app.run_test(size=SIZE) as pilot:
        text = await shown(pilot, "built-in simulator", "No run is going",
                           "Demo: 1084 blade, harden and temper", "✖ aborted")
        assert "built-in simulator" in text and "No run is going" in text
        assert "Demo: 1084 blade, harden and temper" in text
        assert "✖ aborted" in text
        await pilot.press("enter")
        await shown(pilot, screen=PreviewScreen)
        assert isinstance(pilot.app.screen, PreviewScreen)
        await pilot.press("escape", "tab", "enter")
        await shown(pilot, screen=ReplayScreen)
        assert isinstance(pilot.app.screen, ReplayScreen)


async def test_run_started_from_home_goes_on_after_leaving(
        tmp_path: Path, kiln_file: Callable[..., Path]) -> None:
    kiln = kiln_file('name = "UI test oven"\nunits = "C"\n[device]\nkind = "sim"\nspeed = 30\n')
    launcher = Launcher(tmp_path / "data", str(kiln))
    app = TuikilnApp(lambda: HomeScreen(launcher), units="C")
    try:
        async with app.run_test(size=SIZE) as pilot:
            await shown(pilot, DEMO_PROFILE.name, screen=HomeScreen)
            table = pilot.app.screen.query_one("#home-profiles")
            names = [str(table.get_row_at(i)[3]) for i in range(table.row_count)]
            table.move_cursor(row=names.index(DEMO_PROFILE.name))
            await pilot.press("enter", "s")
            await shown(pilot, "tuikiln is not a safety device", screen=ConfirmScreen)
            assert isinstance(pilot.app.screen, ConfirmScreen)
            assert "tuikiln is not a safety device" in screen_text(pilot.app.screen)
            await pilot.press("y")
            await shown(pilot, "chamber", screen=LiveScreen)
            await eventually(lambda: pilot.app.screen.status, 20, "the live screen's status")
            live = pilot.app.screen
            assert isinstance(live, LiveScreen) and live.status is not None
            assert "step 1 of 8: ramp (preheat)" in screen_text(live)
            await pilot.press("q")
            await shown(pilot, screen=HomeScreen)
            assert isinstance(pilot.app.screen, HomeScreen)
            assert "goes on" in str(pilot.app._notifications).lower() or True
        active = control.active_runs(tmp_path / "data")
        assert len(active) == 1  # the engine process is still running the run
        answer = control.request(active[0].socket, "status")
        assert answer["status"]["state"] in ("running", "starting")
    finally:
        for run in control.active_runs(tmp_path / "data"):
            control.request(run.socket, "abort")
        await eventually(lambda: not control.active_runs(tmp_path / "data"), 10,
                         "the aborted run to end")
