"""Profile files: every mistake reported with its line, in plain words; a typed model."""

from __future__ import annotations

import dataclasses
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tuikiln.errors import FileProblems
from tuikiln.profile import Cool, Hold, Pause, Ramp, load_profile, parse_profile

GOOD = """\
name = "A2 harden"
units = "F"
[load]
material = "AISI A2"
thickness = "0.16 in"
pieces = 2
[limits]
band = 15
[[step]]
ramp = "400/h"
to = 1200
[[step]]
hold = "15m"
start = "equalized"
band = 9
[[step]]
pause = "Quench"
[[step]]
cool = "free"
to = 150
"""


def problems(text: str, max_c: float | None = None) -> list[tuple[int | None, str]]:
    with pytest.raises(FileProblems) as caught:
        parse_profile(text, "p.toml", max_c=max_c)
    return [(p.line, p.message) for p in caught.value.problems]


def test_good_profile_gives_an_immutable_model_in_si_units() -> None:
    profile = parse_profile(GOOD, "p.toml")
    assert profile.units == "F" and profile.name == "A2 harden"
    ramp, hold, pause, cool = profile.steps
    assert isinstance(ramp, Ramp) and ramp.to_c == pytest.approx((1200 - 32) * 5 / 9)
    assert ramp.rate_c_per_s == pytest.approx(400 * 5 / 9 / 3600)
    assert isinstance(hold, Hold) and hold.duration_s == 900 and hold.start == "equalized"
    assert hold.band_c == pytest.approx(5.0)
    assert isinstance(pause, Pause) and pause.message == "Quench"
    assert isinstance(cool, Cool) and cool.rate_c_per_s is None
    assert profile.load.thickness_m == pytest.approx(0.16 * 0.0254)
    assert profile.limits["band"] == pytest.approx(15 * 5 / 9)
    assert ramp.line == 9 and cool.line == 18
    with pytest.raises(dataclasses.FrozenInstanceError):
        profile.name = "other"  # type: ignore[misc]


def test_every_mistake_with_its_line() -> None:
    text = """\
name = "bad"
units = "F"
colour = "red"
[load]
thickness = "4 furlongs"
[[step]]
rmap = "400/h"
to = 1200
[[step]]
ramp = "fast"
to = 1300
[[step]]
hold = "15x"
start = "equalised"
[[step]]
ramp = "max"
to = 1000
[[step]]
cool = "free"
hold = "1h"
to = 150
[[step]]
cool = "100/h"
to = 2000
[[step]]
ramp = "max"
to = -600
"""
    found = problems(text)
    lines = [line for line, _ in found]
    assert lines == sorted(lines)
    by_line: dict[int | None, list[str]] = {}
    for line, message in found:
        by_line.setdefault(line, []).append(message)
    assert 'unknown key "colour"' in by_line[3][0]
    assert "thickness" in by_line[5][0]
    assert any('"rmap" (did you mean "ramp"?)' in m for m in by_line[7])
    assert any("exactly one of" in m and "found none" in m for m in by_line[6])
    assert any("rate" in m for m in by_line[10])
    assert any('"hold" needs a duration such as "15m"' in m for m in by_line[13])
    assert any('did you mean "equalized"' in m for m in by_line[14])
    assert any("must go up" in m for m in by_line[17])
    assert any('"hold" and "cool"' in m for m in by_line[18])
    assert any("must go down" in m for m in by_line[24])
    assert any("below absolute zero" in m for m in by_line[27])


@pytest.mark.parametrize(
    "text,line,words",
    [
        ('units = "F"\n[[step]\nramp = 1\n', 2, "not valid TOML"),
        ('units = "K"\n[[step]]\nramp = "max"\nto = 100\n', 1, "unknown units"),
        ('name = "x"\n', None, "needs units"),
        ('units = "C"\n', None, "no steps"),
        ('units = "C"\n[[step]]\nramp = "max"\nto = 900\n', 4, "above the kiln's maximum"),
        ('units = "C"\n[[step]]\nramp = "max"\nto = 700\n[[step]]\nhold = 15\n', None, None),
        ('units = "C"\n[[step]]\npause = ""\n', 3, "needs a message"),
        ('units = "C"\n[[step]]\nramp = "max"\nto = "hot"\n', 4, "must be a number"),
        ('units = "C"\n[[step]]\nramp = "max"\n', 2, 'needs "to"'),
        ('units = "C"\n[load]\npieces = 0\n[[step]]\npause = "x"\n', 3, "pieces"),
        ('units = "C"\n[limits]\nband = -2\n[[step]]\npause = "x"\n', 3, "more than zero"),
        ('units = "C"\n[[step]]\nramp = "max"\nto = 500\nstart = "reached"\n', 5, "does not"),
    ],
)
def test_single_mistakes(text: str, line: int | None, words: str | None) -> None:
    if words is None:  # a bare number of seconds is a valid hold duration
        parse_profile(text, "p.toml", max_c=800)
        return
    found = problems(text, max_c=800)
    assert any(words in message and got == line for got, message in found), found


def test_file_errors_are_plain(tmp_path: Path) -> None:
    with pytest.raises(FileProblems, match="no such file"):
        load_profile(tmp_path / "missing.toml")
    (tmp_path / "bin.toml").write_bytes(b"\xff\xfe\x00bad")
    with pytest.raises(FileProblems, match="UTF-8"):
        load_profile(tmp_path / "bin.toml")
    with pytest.raises(FileProblems, match="folder"):
        load_profile(tmp_path)


@settings(max_examples=200, suppress_health_check=[HealthCheck.too_slow])
@given(st.text(max_size=400))
def test_random_text_never_raises_anything_but_problems(text: str) -> None:
    try:
        parse_profile(text, "fuzz.toml")
    except FileProblems as exc:
        assert exc.problems and all(str(p).startswith("fuzz.toml") for p in exc.problems)


@settings(max_examples=150, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, len(GOOD) - 1), st.integers(0, 255))
def test_mutated_profiles_never_raise_anything_but_problems(pos: int, byte: int) -> None:
    mutated = GOOD[:pos] + chr(byte) + GOOD[pos + 1 :]
    try:
        parse_profile(mutated, "m.toml")
    except FileProblems:
        pass


def test_check_command_reports_all_and_exits_1(tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text('units = "C"\n[[step]]\nramp = "fast"\nto = 500\n[[step]]\nhold = "x"\n')
    good = tmp_path / "good.toml"
    good.write_text(GOOD)
    out = subprocess.run(
        [sys.executable, "-m", "tuikiln", "check", str(good), str(bad)],
        capture_output=True, text=True,
    )
    assert out.returncode == 1
    assert "good.toml: ok: A2 harden: 4 steps" in out.stdout
    assert f"{bad}:3:" in out.stderr and f"{bad}:6:" in out.stderr
    assert "Traceback" not in out.stderr + out.stdout
