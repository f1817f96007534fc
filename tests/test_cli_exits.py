"""Exit statuses and streams of the listing and export commands, as scripts rely on them."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from tuikiln.cli import main

ROOT = Path(__file__).resolve().parent.parent
PROFILE = ROOT / "profiles" / "dry-run.toml"


def test_runs_on_an_empty_log_is_an_empty_list(tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    data = str(tmp_path / "never-used")
    assert main(["--data", data, "runs", "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == []
    assert main(["--data", data, "runs"]) == 0
    assert capsys.readouterr().out.strip() == "no runs logged yet"
    # Export still needs a run: that is a mistake, said in words.
    assert main(["--data", data, "export", "last", "--csv"]) == 1
    assert "no runs logged yet" in capsys.readouterr().err


def test_export_to_dash_writes_the_standard_output(tmp_path: Path, data_folder: Path,
                                                   monkeypatch: pytest.MonkeyPatch,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.chdir(tmp_path)
    data = str(data_folder)
    assert main(["--data", data, "run", str(PROFILE), "--headless", "--speed", "max",
                 "--auto-continue"]) == 0
    capsys.readouterr()
    assert main(["--data", data, "export", "1", "--csv", "-o", "-"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("t_s,utc,chamber_c,load_c")
    assert len(out) > 10
    assert not (tmp_path / "-").exists()  # not a file named "-"
    assert main(["--data", data, "runs", "--json"]) == 0
    assert [r["id"] for r in json.loads(capsys.readouterr().out)] == [1]


def test_runs_shows_each_run_s_length_on_its_own_clock(tmp_path: Path, data_folder: Path,
                                                       monkeypatch: pytest.MonkeyPatch,
                                                       capsys: pytest.CaptureFixture[str]
                                                       ) -> None:
    """A simulated run sped up ends, on its own clock, hours after it started on the wall
    clock: the listing gives its start (wall clock) and its length (its own clock, with
    the speed), not an end time hours in the future."""
    import time

    monkeypatch.chdir(tmp_path)
    data = str(data_folder)
    before = time.time()
    assert main(["--data", data, "run", str(PROFILE), "--headless", "--speed", "max",
                 "--auto-continue"]) == 0
    capsys.readouterr()
    assert main(["--data", data, "runs", "--json"]) == 0
    (row,) = json.loads(capsys.readouterr().out)
    length_s = row["ended"] - row["started"]
    assert length_s > 600.0  # the dry run's simulated quarter of an hour and more
    assert main(["--data", data, "runs"]) == 0
    header, line = capsys.readouterr().out.splitlines()[:2]
    assert header.split()[:4] == ["id", "started", "length", "outcome"]
    from tuikiln.units import format_duration

    assert f"{format_duration(length_s)} (sim max)" in line
    started = time.strftime("%Y-%m-%d %H:%M", time.localtime(row["wall_started"]))
    assert started in line and row["wall_started"] >= before - 1.0
