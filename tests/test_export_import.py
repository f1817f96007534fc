"""A run exported with `tuikiln export` reads back with `tuikiln import` without options."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from tuikiln.cli import main

ROOT = Path(__file__).resolve().parent.parent
PROFILE = ROOT / "profiles" / "dry-run.toml"


def test_export_then_import_round_trip(tmp_path: Path, data_folder: Path,
                                       capsys: pytest.CaptureFixture[str]) -> None:
    data = str(data_folder)
    assert main(["--data", data, "run", str(PROFILE), "--headless", "--speed", "max",
                 "--auto-continue"]) == 0
    out = tmp_path / "run.csv"
    assert main(["--data", data, "export", "1", "--csv", "-o", str(out)]) == 0
    capsys.readouterr()
    assert out.read_text().splitlines()[0].startswith("t_s,utc,chamber_c,load_c")
    assert main(["import", str(out), "--against", str(PROFILE), "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert [s["kind"] for s in result["steps"]] == ["ramp", "hold", "pause", "cool"]
    assert result["steps"][0]["verdict"] == "met"


def test_bad_report_suffix_and_unwritable_export(tmp_path: Path, data_folder: Path,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    data = str(data_folder)
    assert main(["--data", data, "run", str(PROFILE), "--headless", "--speed", "max",
                 "--auto-continue"]) == 0
    assert main(["--data", data, "report", "1", "-o", str(tmp_path / "r.pdf")]) == 1
    assert main(["--data", data, "export", "1", "--csv", "-o",
                 str(tmp_path / "missing" / "x.csv")]) == 1
    err = capsys.readouterr().err
    assert "HTML, Markdown or text" in err and "cannot write" in err
