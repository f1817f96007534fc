"""Terminal fallbacks: the chart without braille (the Linux console) and without colour
(NO_COLOR), and how the character set is chosen (--glyphs, $TUIKILN_GLYPHS, $TERM)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tests.test_ui_fakes import DEMO_PROFILE
from tuikiln.cli import main
from tuikiln.ui.chartdraw import ChartSpec, Trace, render_chart, strips_text
from tuikiln.ui.glyphs import (
    ASCII_GLYPHS,
    BLOCK_GLYPHS,
    BRAILLE_GLYPHS,
    GLYPH_SETS,
    choose_glyphs,
)


def braille_in(text: str) -> bool:
    # Unicode block "Braille Patterns" is U+2800..U+28FF (The Unicode Standard, ch. 21.1).
    return any(0x2800 <= ord(ch) <= 0x28FF for ch in text)


def two_line_spec() -> ChartSpec:
    """A chamber ramping to 800 and a plan lying 150 below it: apart on every column."""
    t = np.linspace(0.0, 3600.0, 3601)
    chamber = Trace("chamber", t, 20.0 + t * 0.2)
    plan = Trace("plan", np.array([0.0, 3600.0]), np.array([20.0, 570.0]), dashed=True,
                 max_gap_s=math.inf)
    return ChartSpec(0.0, 3600.0, 0.0, 800.0, [chamber, plan], now=1800.0)


def body(lines: list[str]) -> str:
    """The plot area: the lines above the time axis, without the y axis labels."""
    return "\n".join(line[6:] for line in lines[:-1])


def test_braille_by_default_keeps_its_dots() -> None:
    lines = strips_text(render_chart(two_line_spec(), 60, 16))
    assert braille_in(body(lines))
    assert "█" not in body(lines)


@pytest.mark.parametrize("glyphs", [BLOCK_GLYPHS, ASCII_GLYPHS], ids=lambda g: g.name)
def test_without_braille_each_line_has_its_own_mark(glyphs) -> None:  # noqa: ANN001
    lines = strips_text(render_chart(two_line_spec(), 60, 16, glyphs=glyphs))
    plot = body(lines)
    assert not braille_in("\n".join(lines))
    assert glyphs.mark("chamber") in plot and glyphs.mark("plan") in plot
    assert glyphs.mark("chamber") != glyphs.mark("plan")
    # The chamber runs above the plan in every column past the first few: its mark is
    # higher up the chart than the plan's wherever both are drawn.
    rows = lines[:-1]
    for column in range(12, 54):
        marks = [row[6 + column] for row in rows]
        if glyphs.mark("chamber") in marks and glyphs.mark("plan") in marks:
            assert marks.index(glyphs.mark("chamber")) < marks.index(glyphs.mark("plan"))
    assert glyphs.now in plot  # the now marker is there too


def test_ascii_set_is_ascii_and_block_set_is_in_code_page_437() -> None:
    # Code page 437 is the IBM PC character set; the Linux console's built-in font carries
    # it (from memory). Python's "cp437" codec is its reference table.
    ascii_lines = strips_text(render_chart(two_line_spec(), 60, 16, glyphs=ASCII_GLYPHS))
    "\n".join(ascii_lines).encode("ascii")
    block_lines = strips_text(render_chart(two_line_spec(), 60, 16, glyphs=BLOCK_GLYPHS))
    "\n".join(block_lines).encode("cp437")
    for glyphs in (BLOCK_GLYPHS, ASCII_GLYPHS):
        chars = "".join(glyphs.marks.values()) + "".join(
            (glyphs.axis_label, glyphs.axis_line, glyphs.corner, glyphs.time_tick,
             glyphs.now, glyphs.cursor, glyphs.solid, glyphs.dashed))
        chars.encode("ascii" if glyphs is ASCII_GLYPHS else "cp437")
        assert len(set(glyphs.marks.values())) == len(glyphs.marks)  # a shape each


def test_shapes_with_braille_when_colour_is_off() -> None:
    lines = strips_text(render_chart(two_line_spec(), 60, 16, glyphs=BRAILLE_GLYPHS,
                                     shapes=True))
    plot = body(lines)
    assert not braille_in(plot)
    assert BRAILLE_GLYPHS.mark("chamber") in plot and BRAILLE_GLYPHS.mark("plan") in plot


def test_an_overshoot_still_shows_by_mark() -> None:
    # One sample 60 degrees above a flat hold must light a cell above the hold's row.
    t = np.arange(0.0, 3600.0)
    y = np.full(t.size, 500.0)
    y[1800] = 560.0
    spec = ChartSpec(0.0, 3600.0, 0.0, 600.0, [Trace("chamber", t, y)])
    lines = strips_text(render_chart(spec, 60, 16, glyphs=BLOCK_GLYPHS))
    rows_with_mark = [i for i, line in enumerate(lines[:-1]) if "█" in line[6:]]
    assert len(rows_with_mark) >= 2  # the hold's row and the overshoot's above it


@pytest.mark.parametrize(("term", "expected"), [
    ("linux", "block"), ("linux-16color", "block"), ("vt100", "ascii"),
    ("xterm-256color", "braille"), ("tmux-256color", "braille"), ("", "braille"),
])
def test_auto_follows_term(term: str, expected: str) -> None:
    assert choose_glyphs(None, {"TERM": term}).name == expected


def test_option_beats_variable_beats_term() -> None:
    env = {"TERM": "linux", "TUIKILN_GLYPHS": "ascii"}
    assert choose_glyphs(None, env) is GLYPH_SETS["ascii"]
    assert choose_glyphs("braille", env) is GLYPH_SETS["braille"]
    assert choose_glyphs("auto", env) is GLYPH_SETS["block"]  # auto: back to TERM
    assert choose_glyphs(None, {"TERM": "linux", "TUIKILN_GLYPHS": "auto"}).name == "block"


def test_bad_variable_is_one_line_and_starts_nothing(monkeypatch, capsys) -> None:  # noqa: ANN001
    monkeypatch.setenv("TUIKILN_GLYPHS", "fancy")
    code = main(["demo", "--profile", str(DEMO_PROFILE)])
    err = capsys.readouterr().err.strip()
    assert code == 1
    assert err == ('tuikiln: TUIKILN_GLYPHS "fancy": use one of auto, braille, block, '
                   "ascii")


def test_bad_option_is_refused(capsys) -> None:  # noqa: ANN001
    with pytest.raises(SystemExit) as exit_info:
        main(["review", "--glyphs", "fancy"])
    assert exit_info.value.code == 1
    assert "--glyphs" in capsys.readouterr().err


async def test_alarm_banner_on_the_linux_console_keeps_to_its_font() -> None:
    from textual.app import ComposeResult
    from textual.screen import Screen

    from tests.test_ui_fakes import shown
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.widgets.alarm_banner import AlarmBanner

    class BannerScreen(Screen[None]):
        def compose(self) -> ComposeResult:
            yield AlarmBanner()

    alarms = [{"code": "too-hot", "severity": "critical", "words": "chamber 1530 °F",
               "acknowledged": False},
              {"code": "hold-slipped", "severity": "warning", "words": "out of band",
               "acknowledged": True}]
    for glyphs in (BRAILLE_GLYPHS, BLOCK_GLYPHS):
        app = TuikilnApp(BannerScreen, units="F", glyphs=glyphs)
        async with app.run_test(size=(80, 24)) as pilot:
            banner = pilot.app.screen.query_one(AlarmBanner)
            banner.units = "F"
            banner.alarms = alarms
            text = await shown(pilot, "CRITICAL ALARM: chamber 1530 °F", "WARNING ALARM")
        assert "CRITICAL ALARM: chamber 1530 °F" in text and "WARNING ALARM" in text
        if glyphs is BLOCK_GLYPHS:
            text.encode("cp437")  # code page 437: the Linux console's font (from memory)
        else:
            assert "✖ CRITICAL" in text
