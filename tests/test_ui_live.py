"""The live run screen through Textual's Pilot, fed by a real SQLite run log."""

from __future__ import annotations

import re
from pathlib import Path

from textual.widgets import Input

from tests.test_ui_fakes import OVERSHOOT, ScriptedEngine, screen_text, shown
from tests.waiting import eventually
from tuikiln.ui.app import TuikilnApp
from tuikiln.ui.chartdraw import strips_text
from tuikiln.ui.screens.confirm import ConfirmScreen
from tuikiln.ui.screens.live import LiveScreen
from tuikiln.ui.screens.note import NoteScreen
from tuikiln.ui.widgets.alarm_banner import AlarmBanner
from tuikiln.units import c_to_f

SIZE = (100, 30)


def make_app(engine: ScriptedEngine, units: str = "F") -> TuikilnApp:
    return TuikilnApp(lambda: LiveScreen(engine.link(), poll_s=0.1), units=units)


async def sent(engine: ScriptedEngine, command: tuple[str, str | None]) -> None:
    """Until the screen's last command to the engine is `command`."""
    await eventually(lambda: engine.commands[-1:] == [command], 20, f"the command {command}")


async def laid_out(pilot) -> None:  # noqa: ANN001
    """Until the app is idle: the layout after what was awaited is done (regions checked)."""
    await pilot.pause()


async def test_shows_chart_temperatures_and_step(tmp_path: Path) -> None:
    engine = ScriptedEngine(tmp_path)
    engine.advance(1800)  # 30 min at 0.2 °C/s: 380 °C
    async with make_app(engine).run_test(size=SIZE) as pilot:
        text = await shown(pilot, f"chamber {c_to_f(engine.chamber_c):.0f} °F",
                           "heating to 1200 °F at 900°F/h", "step 1 of 8: ramp (preheat)",
                           "━━ chamber", "│ now", "next step", "you're needed")
        assert f"chamber {c_to_f(engine.chamber_c):.0f} °F" in text
        assert "heating to 1200 °F at 900°F/h" in text  # the demo profile's first step
        assert "step 1 of 8: ramp (preheat)" in text
        assert "━━ chamber" in text and "│ now" in text
        assert any(0x2800 < ord(ch) <= 0x28FF for ch in text)  # braille dots were drawn
        assert "next step" in text and "you're needed" in text and "end" in text


async def test_alarm_shows_without_colour_and_is_acknowledged(tmp_path: Path) -> None:
    engine = ScriptedEngine(tmp_path)
    engine.advance(60)
    async with make_app(engine).run_test(size=SIZE) as pilot:
        await shown(pilot, "step 1 of 8")  # the screen has read the log once
        engine.raise_alarm("overshoot", OVERSHOOT)
        banner = pilot.app.screen.query_one(AlarmBanner)
        await eventually(lambda: banner.display and "WARNING ALARM" in str(banner.content), 20,
                         "the alarm banner")
        assert banner.display and banner.has_class("-active")
        words = str(banner.content)
        assert "▲ WARNING ALARM: chamber 1530 °F, 40 °F above the target" in words
        assert "press a to acknowledge" in words
        await pilot.press("a")
        await eventually(lambda: "(seen)" in str(banner.content), 20, "the alarm marked seen")
        assert ("ack", None) in engine.commands
        assert "(seen)" in str(banner.content) and banner.has_class("-seen")


async def test_unit_switch_converts_every_value(tmp_path: Path) -> None:
    engine = ScriptedEngine(tmp_path)
    engine.advance(1800)
    engine.raise_alarm("overshoot", OVERSHOOT)
    async with make_app(engine, units="F").run_test(size=SIZE) as pilot:
        fahrenheit = await shown(pilot, "chamber 1530 °F, 40 °F above the target",
                                 f"chamber {c_to_f(engine.chamber_c):.0f} °F", "heating to 1200 °F")
        await pilot.press("u")
        celsius = await shown(pilot, "chamber 832 °C, 22 °C above the target",
                              f"chamber {engine.chamber_c:.0f} °C", "heating to 649 °C",
                              absent=("°F",))
    assert "°F" in fahrenheit
    assert "°F" not in celsius, [line for line in celsius.splitlines() if "°F" in line]
    # 1530 °F = 832 °C; a 40 °F difference is 22 K (not 4 °C): differences convert as such.
    assert "chamber 832 °C, 22 °C above the target" in celsius
    assert f"chamber {engine.chamber_c:.0f} °C" in celsius
    assert "heating to 649 °C" in celsius  # 1200 °F
    # The big digits change too.
    assert re.search(rf"\b{engine.chamber_c:.0f}\b", celsius)


async def test_controls_send_commands_and_confirm_first(tmp_path: Path) -> None:
    engine = ScriptedEngine(tmp_path)
    engine.advance(60)
    async with make_app(engine).run_test(size=SIZE) as pilot:
        await shown(pilot, "step 1 of 8")
        await pilot.press("p")
        await sent(engine, ("pause", None))
        assert engine.commands[-1] == ("pause", None)
        assert "PAUSED by you" in await shown(pilot, "PAUSED by you")
        await pilot.press("r")
        await sent(engine, ("resume", None))
        assert engine.commands[-1] == ("resume", None)
        await pilot.press("s")
        await shown(pilot, "Skip step 1", screen=ConfirmScreen)
        assert isinstance(pilot.app.screen, ConfirmScreen)
        assert "Skip step 1" in screen_text(pilot.app.screen)
        await pilot.press("n")
        await shown(pilot, screen=LiveScreen)
        await pilot.pause()  # whatever "no" would send is sent by now
        assert engine.commands[-1] == ("resume", None)  # said no: nothing sent
        await pilot.press("s", "y")
        await sent(engine, ("skip", None))
        assert engine.commands[-1] == ("skip", None)
        await pilot.press("x")
        await shown(pilot, screen=ConfirmScreen)
        assert isinstance(pilot.app.screen, ConfirmScreen)
        await pilot.press("escape")
        await shown(pilot, screen=LiveScreen)
        await pilot.pause()
        assert all(name != "abort" for name, _ in engine.commands)
        await pilot.press("n")
        await shown(pilot, screen=NoteScreen)
        assert isinstance(pilot.app.screen, NoteScreen)
        pilot.app.screen.query_one(Input).value = "into the oil"  # typing is Input's own job
        await pilot.press("enter")
        await sent(engine, ("note", "into the oil"))
        assert engine.commands[-1] == ("note", "into the oil")
        # back from the log
        assert "into the oil" in await shown(pilot, "into the oil", screen=LiveScreen)
        title = str(pilot.app.screen.query_one("#live-title").content)
        await pilot.press("z")
        await eventually(lambda: "last hour" in str(
            pilot.app.screen.query_one("#live-title").content), 20, "the chart's last hour")
        assert "whole run" in title
        assert "last hour" in str(pilot.app.screen.query_one("#live-title").content)


async def test_pause_step_names_the_key(tmp_path: Path) -> None:
    engine = ScriptedEngine(tmp_path)
    engine.advance(60)
    engine.enter_pause()
    async with make_app(engine).run_test(size=SIZE) as pilot:
        text = await shown(pilot, "☛ WAITING FOR YOU: Quench",
                           "WAITING FOR THE QUENCH: press a when done", "you're needed NOW")
        await laid_out(pilot)
        # The pause's words in a full-width band, with a symbol and capitals (no colour needed).
        notice = pilot.app.screen.query_one("#live-notice")
        assert notice.display and notice.region.width == SIZE[0]
        assert ("☛ WAITING FOR YOU: Quench: oil-quench the blade now, then acknowledge  "
                "[press a]") in str(notice.content)
        assert "WAITING FOR THE QUENCH: press a when done" in text
        assert "you're needed NOW" in text
        await pilot.press("a")
        assert "cooling with the heater off to 400 °F" in await shown(
            pilot, "cooling with the heater off to 400 °F")
        await eventually(lambda: not pilot.app.screen.query_one("#live-notice").display, 20,
                         "the pause's notice gone")
        assert not pilot.app.screen.query_one("#live-notice").display


async def test_leaving_keeps_the_run_going(tmp_path: Path) -> None:
    engine = ScriptedEngine(tmp_path)
    engine.advance(60)
    app = make_app(engine)
    async with app.run_test(size=SIZE) as pilot:
        await shown(pilot, "step 1 of 8")
        await pilot.press("q")
        await eventually(lambda: app.return_value is not None, 20, "the screen to close")
    assert app.return_value is not None and "tuikiln watch" in app.return_value
    assert all(name not in ("abort", "pause") for name, _ in engine.commands)
    # The engine side still answers and the log still grows after the screen is gone.
    assert (await engine.status())["state"] == "running"
    engine.advance(10)
    assert engine.log.sample_count(engine.run_id) == 70


async def test_everything_that_matters_shows_at_80x24(tmp_path: Path) -> None:
    engine = ScriptedEngine(tmp_path)
    engine.advance(1800)
    engine.raise_alarm("overshoot", OVERSHOOT)
    async with make_app(engine).run_test(size=(80, 24)) as pilot:
        await shown(pilot, "target  1200 °F", "heating to 1200 °F", "next step",
                    "you're needed", "end ", "│ now", "WARNING ALARM")
        await laid_out(pilot)
        screen = pilot.app.screen
        chart = screen.query_one("#live-chart")
        legend = strips_text(chart.strips())[0]
        assert "plan" in legend and "│ now" in legend  # the legend is not cut mid-word
        assert "core (estimate)" not in legend  # the short wording was chosen to fit
        banner = screen.query_one(AlarmBanner)
        assert banner.display and banner.region.width == 80
        assert screen.region.contains_region(banner.region)
        main = screen.query_one("#live-main").region
        for line in ("#temps", "#step-words", "#times"):
            widget = screen.query_one(line)
            assert main.contains_region(widget.region), (line, widget.region, main)
        text = screen_text(screen)
        assert "target  1200 °F" in text and "heating to 1200 °F" in text
        assert "next step" in text and "you're needed" in text and "end " in text


async def test_heat_not_yet_confirmed_off_shows_above_everything(tmp_path: Path) -> None:
    # The run ended on a lost link and the engine still tries to turn the heat off: the
    # screen says so first, in capitals, with nothing to acknowledge (only a hand on the
    # oven's switch ends it). The words are the engine's own (tuikiln.engine.status).
    from tuikiln.engine.status import SAFE_RETRY_WORDS, safe_state

    class Retrying(ScriptedEngine):
        async def status(self):
            status = dict(await super().status() or {})
            status["state"] = "ended"
            status["safe_state"] = safe_state(self.t - 150.0, 4, self.t)
            return status

    engine = Retrying(tmp_path)
    engine.advance(600)
    engine.raise_alarm("overshoot", OVERSHOOT)
    async with make_app(engine).run_test(size=SIZE) as pilot:
        banner = pilot.app.screen.query_one(AlarmBanner)
        await eventually(lambda: banner.display and "WARNING ALARM" in str(banner.content), 20,
                         "the alarm banner with the safe-state line")
        assert banner.display and banner.has_class("-active")
        lines = str(banner.content).splitlines()
        assert lines[0] == (f"✖ CRITICAL: {SAFE_RETRY_WORDS} "
                            "(4 tries so far, 2m30s since the run ended)"), lines
        assert "WARNING ALARM" in lines[1]
        await pilot.press("a")  # acknowledging the alarm does not quiet the safe-state line
        await eventually(lambda: "(seen)" in str(banner.content), 20, "the alarm marked seen")
        assert not banner.has_class("-seen")
        assert str(banner.content).splitlines()[0].startswith("✖ CRITICAL")
