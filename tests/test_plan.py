"""The planned curve: totals worked out by hand, in both units, through `tuikiln plan`."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import pytest

from tuikiln.cli import main
from tuikiln.plan import plan_profile
from tuikiln.profile import parse_profile

# Each case: profile text, --from (or None), hand-computed total seconds, peak in the
# profile's units, open-ended. The arithmetic is written beside each.
CASES = [
    (  # 20 -> 220 C at 100/h = 2 h; hold 30 min; 220 -> 120 at 50/h = 2 h: 16 200 s
        'units = "C"\n[[step]]\nramp = "100/h"\nto = 220\n[[step]]\nhold = "30m"\n'
        '[[step]]\ncool = "50/h"\nto = 120\n',
        None, 7200 + 1800 + 7200, 220, False,
    ),
    (  # 68 -> 1200 F at 400/h = 1132/400 h = 2.83 h = 10 188 s; hold 15 min: 11 088 s
        'units = "F"\n[[step]]\nramp = "400/h"\nto = 1200\n[[step]]\nhold = "15m"\n',
        None, 10188 + 900, 1200, False,
    ),
    (  # 68 -> 468 F at 10/min = 40 min; max ramp 0; equalized hold 1h30m counted at 5400;
       # pause 0; free cool 0: 7 800 s, open-ended
        'units = "F"\n[[step]]\nramp = "10/min"\nto = 468\n[[step]]\nramp = "max"\n'
        'to = 1500\n[[step]]\nhold = "1h30m"\nstart = "equalized"\n[[step]]\npause = "q"\n'
        '[[step]]\ncool = "free"\nto = 200\n',
        None, 2400 + 5400, 1500, True,
    ),
    (  # from 100 C: 100 -> 900 at 200/h = 4 h; hold 90 s; 900 -> 300 at 300/h = 2 h
        'units = "C"\n[[step]]\nramp = "200/h"\nto = 900\n[[step]]\nhold = "90s"\n'
        '[[step]]\ncool = "300/h"\nto = 300\n',
        "100C", 14400 + 90 + 7200, 900, False,
    ),
    (  # 68 -> 300 F at 50/h = 4.64 h = 16 704 s; hold 2 h; 300 -> 350 at 25/h = 2 h;
       # hold 2 h; free cool 0: 38 304 s
        'units = "F"\n[[step]]\nramp = "50/h"\nto = 300\n[[step]]\nhold = "2h"\n'
        '[[step]]\nramp = "25/h"\nto = 350\n[[step]]\nhold = "2h"\n[[step]]\ncool = "free"\n'
        'to = 100\n',
        None, 16704 + 7200 + 7200 + 7200, 350, True,
    ),
    (  # from 212 F (= 100 C): 212 -> 392 F at 180/h = 1 h; hold 1h: 7 200 s
        'units = "F"\n[[step]]\nramp = "180/h"\nto = 392\n[[step]]\nhold = "1h"\n',
        "100C", 3600 + 3600, 392, False,
    ),
]


def plan_json(tmp_path: Path, capsys: pytest.CaptureFixture[str], text: str,
              *extra: str) -> dict:
    path = tmp_path / "p.toml"
    path.write_text(text)
    assert main(["plan", str(path), "--json", *extra]) == 0
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("text,start,total,peak,open_ended", CASES)
def test_totals_by_hand_in_both_units(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                      text: str, start: str | None, total: float, peak: float,
                                      open_ended: bool) -> None:
    extra = ["--from", start] if start else []
    written = "F" if 'units = "F"' in text else "C"
    other = "C" if written == "F" else "F"
    same = plan_json(tmp_path, capsys, text, *extra)
    assert same["total_s"] == pytest.approx(total, abs=1e-6)
    assert same["peak"] == pytest.approx(peak)
    assert same["units"] == written
    assert same["open_ended"] is open_ended
    converted = plan_json(tmp_path, capsys, text, *extra, "--units", other)
    assert converted["total_s"] == pytest.approx(total, abs=1e-6)
    expect_peak = (peak - 32) * 5 / 9 if written == "F" else peak * 9 / 5 + 32
    assert converted["peak"] == pytest.approx(expect_peak, abs=1e-3)
    steps = same["steps"]
    assert [s["index"] for s in steps] == list(range(len(steps)))
    assert steps[0]["start_s"] == 0 and steps[-1]["end_s"] == pytest.approx(total)
    for before, after in zip(steps, steps[1:], strict=False):
        assert after["start_s"] == before["end_s"] and after["from"] == before["to"]
    assert {"kind", "from", "to", "open_ended"} <= set(steps[0])


def test_open_ended_steps_are_marked() -> None:
    plan = plan_profile(parse_profile(CASES[2][0]))
    assert [s.open_ended for s in plan.steps] == [False, True, True, True, True]
    assert plan.setpoint_at(1200) == pytest.approx(20 + (200 * 5 / 9) * 1.0 * 1200 / 1200)


def test_curve_is_piecewise_linear() -> None:
    plan = plan_profile(parse_profile(CASES[0][0]))
    assert plan.setpoint_at(3600) == pytest.approx(120)  # half-way up the 2 h ramp
    assert plan.setpoint_at(7200 + 900) == pytest.approx(220)
    t, sp = plan.sample(60)
    assert t[-1] == plan.total_s and np.all(np.diff(t) > 0)
    assert sp.max() == pytest.approx(220)


def test_csv_rows(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "p.toml"
    path.write_text(CASES[0][0])
    assert main(["plan", str(path), "--csv", "--every", "600"]) == 0
    rows = list(csv.reader(io.StringIO(capsys.readouterr().out)))
    assert rows[0] == ["time_s", "setpoint_C"]
    assert float(rows[-1][0]) == 16200 and float(rows[-1][1]) == pytest.approx(120)
    assert float(rows[7][1]) == pytest.approx(120)  # 3600 s, half-way up


def test_plan_table_and_bad_from(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "p.toml"
    path.write_text(CASES[2][0])
    assert main(["plan", str(path)]) == 0
    out = capsys.readouterr().out
    assert "open-ended" in out and "wait for you: q" in out
    assert main(["plan", str(path), "--from", "warm"]) == 1
    assert "--from" in capsys.readouterr().err
