"""The load as the profile gives it, in plain words: the preview screen (through Pilot) and the
report of a run (Markdown and HTML), foil wrap and width included."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from tests.test_replay_sim import simulate_run
from tests.test_ui_fakes import screen_text
from tests.waiting import eventually
from tuikiln.cli import main
from tuikiln.plan import load_words
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog
from tuikiln.ui.app import TuikilnApp
from tuikiln.ui.screens.preview import PreviewScreen

STEPS = """
[[step]]
ramp = "max"
to = 500
[[step]]
hold = "10m"
label = "soak"
"""
FOIL = 'material = "AISI A2"\nthickness = "4 mm"\nwidth = "50 mm"\nwrap = "foil"'
FOIL_WORDS = "AISI A2, 4 mm thick, 50 mm wide, wrapped in foil"


def profile_text(load: str) -> str:
    table = f"[load]\n{load}\n" if load else ""
    return f'name = "load words"\nunits = "C"\n{table}{STEPS}'


@pytest.mark.parametrize("load, words", [
    (FOIL, FOIL_WORDS),
    ('material = "AISI D2"\nthickness = "0.25 in"\npieces = 3',
     "3 pieces of AISI D2, 0.25 in thick"),
    ('thickness = "6 mm"', "steel not named, 6 mm thick"),
    ('material = "1084"\npieces = 1', "1084, thickness not given"),
    ('wrap = "foil"', "steel not named, thickness not given, wrapped in foil"),
    ("", None),
], ids=["foil", "pieces", "no-material", "no-thickness", "foil-only", "none"])
def test_the_load_in_words(load: str, words: str | None) -> None:
    assert load_words(parse_profile(profile_text(load), "p.toml").load) == words


async def test_the_preview_shows_the_load_wrapped_in_foil(tmp_path: Path) -> None:
    path = tmp_path / "a2-foil.toml"
    path.write_text(profile_text(FOIL), encoding="utf-8")
    app = TuikilnApp(lambda: PreviewScreen(path), units="C")
    async with app.run_test(size=(100, 30)) as pilot:
        text = await eventually(lambda: (t := screen_text(pilot.app.screen))
                                and "load:" in t and t)
        assert f"load: {FOIL_WORDS}" in text
        assert "wrap:" not in text


@pytest.mark.parametrize("suffix", ["md", "html"])
def test_the_report_says_the_load_in_words(tmp_path: Path, suffix: str) -> None:
    log = RunLog(tmp_path / "runs.sqlite")
    simulate_run(log, profile_text(FOIL), limit_s=20_000)
    log.close()
    out = tmp_path / f"report.{suffix}"
    assert main(["--data", str(tmp_path), "report", "last", "-o", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    assert f"load: {FOIL_WORDS}" in text
    # Before, the record's keys came out one a line as stored ("wrap: none", "width: 50 mm").
    assert not re.search(r"(^|>|- )(wrap|width): ", text, re.MULTILINE)
    assert "load thermocouple: logged" in text


PROFILES = Path(__file__).resolve().parent.parent / "profiles"


@pytest.mark.parametrize("name", ["a2-harden-temper.toml", "d2-harden-temper.toml"])
def test_the_air_hardening_examples_say_how_to_declare_the_foil(name: str) -> None:
    text = (PROFILES / name).read_text(encoding="utf-8")
    assert "stainless steel foil" in text and "common practice, no source" in text
    as_shipped = parse_profile(text, name)
    assert as_shipped.load.wrap == "none"  # the example's behaviour, pinned elsewhere, stays
    wrapped = parse_profile(text.replace('# wrap = "foil"', 'wrap = "foil"'), name)
    assert wrapped.load.wrap == "foil"
    assert load_words(wrapped.load).endswith(", wrapped in foil")
    assert wrapped.steps == as_shipped.steps
