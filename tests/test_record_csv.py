"""CSV logs as people have them (issue 17, part 2): separators, decimal commas, encodings,
time forms and units read from the file; contradictions refused in one line."""

from __future__ import annotations

import contextlib
import csv
import io
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tuikiln.analysis.csvlog import CsvLayout, parse_csv_log, read_csv_log
from tuikiln.cli import main
from tuikiln.errors import FileProblems

# (°F - 32) / 1.8 = °C (NIST SP 811, appendix B.9): 212 °F = 100 °C, 392 °F = 200 °C.
F_READINGS = ["212", "392", "401.0"]
C_FROM_F = [100.0, 200.0, 205.0]


def _spreadsheet(rows: list[list[str]], path: Path, encoding: str = "utf-8-sig") -> Path:
    """What a spreadsheet in a decimal-comma locale writes: ";" between cells, "," in
    numbers, CRLF line ends, a byte-order mark ("CSV UTF-8")."""
    with open(path, "w", newline="", encoding=encoding) as handle:
        writer = csv.writer(handle, delimiter=";", lineterminator="\r\n")
        for row in rows:
            writer.writerow([cell.replace(".", ",") if _numeric(cell) else cell
                             for cell in row])
    return path


def _numeric(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def test_spreadsheet_semicolon_decimal_comma_bom_crlf(tmp_path: Path) -> None:
    path = _spreadsheet([["Time (s)", "Chamber (°C)", "Load (°C)"],
                         ["0", "20.5", "19.0"], ["10", "21.25", "19.5"],
                         ["20", "22.0", "20.0"]], tmp_path / "sheet.csv")
    assert path.read_bytes().startswith(b"\xef\xbb\xbf")
    assert b";21,25;" in path.read_bytes() and b"\r\n" in path.read_bytes()
    log = read_csv_log(path, CsvLayout(load_column="load"))
    np.testing.assert_allclose(log.time_s, [0.0, 10.0, 20.0])
    np.testing.assert_allclose(log.chamber_c, [20.5, 21.25, 22.0])
    assert log.load_c is not None
    np.testing.assert_allclose(log.load_c, [19.0, 19.5, 20.0])


def test_latin1_fahrenheit_header(tmp_path: Path) -> None:
    path = tmp_path / "old.csv"
    with open(path, "w", newline="", encoding="latin-1") as handle:
        writer = csv.writer(handle)
        writer.writerow(["time", "Chamber °F"])
        writer.writerows([[str(i * 60), f] for i, f in enumerate(F_READINGS)])
    assert b"\xb0F" in path.read_bytes()  # "°" as Latin-1 writes it, not UTF-8
    log = read_csv_log(path)
    assert log.units == "F"
    np.testing.assert_allclose(log.chamber_c, C_FROM_F)


@pytest.mark.parametrize("header", ["chamber (F)", "chamber [F]", "chamber degF",
                                    "Chamber deg F", "chamber ℉"])
def test_fahrenheit_in_the_header(header: str) -> None:
    text = f"time,{header}\n" + "".join(f"{i},{f}\n" for i, f in enumerate(F_READINGS))
    log = parse_csv_log(text, "x.csv")
    np.testing.assert_allclose(log.chamber_c, C_FROM_F)


def test_header_unit_contradicting_the_option_is_refused() -> None:
    text = "time,chamber (°F)\n0,212\n1,213\n"
    with pytest.raises(FileProblems) as caught:
        parse_csv_log(text, "x.csv", CsvLayout(units="C"))
    (problem,) = caught.value.problems
    assert problem.line == 1 and "°F" in problem.message and "given as C" in problem.message
    # Agreeing is fine.
    assert parse_csv_log(text, "x.csv", CsvLayout(units="F")).chamber_c[0] == pytest.approx(100)


def test_columns_with_different_units_are_refused() -> None:
    with pytest.raises(FileProblems, match="different units"):
        parse_csv_log("time,chamber (C),load (F)\n0,20,70\n1,21,71\n", "x.csv",
                      CsvLayout(load_column="load"))


def test_decimal_comma_with_comma_separator_is_refused() -> None:
    with pytest.raises(ValueError, match="another column separator"):
        CsvLayout(decimal=",", delimiter=",")


def test_elapsed_hms() -> None:
    log = parse_csv_log("time,chamber\n0:00:00,20\n0:00:10,21\n1:59:50,205\n25:00:00,60\n",
                        "x.csv")
    np.testing.assert_allclose(log.time_s, [0.0, 10.0, 7190.0, 90000.0])


def test_iso_times_are_found_without_options() -> None:
    log = parse_csv_log("time,chamber\n2024-03-01T13:00:00Z,20\n2024-03-01T13:00:10Z,21\n",
                        "x.csv")
    np.testing.assert_allclose(log.time_s, [0.0, 10.0])
    # 2024-03-01T13:00:00Z as Unix time, by Python's datetime (an independent count).
    assert log.start_epoch == datetime(2024, 3, 1, 13, tzinfo=UTC).timestamp()


def test_epoch_seconds() -> None:
    start = datetime(2024, 1, 1, tzinfo=UTC).timestamp()  # 1704067200
    log = parse_csv_log(f"time,chamber\n{start:.0f},20\n{start + 10:.0f},21\n", "x.csv")
    np.testing.assert_allclose(log.time_s, [0.0, 10.0])
    assert log.start_epoch == start


def test_spreadsheet_day_serials_are_days_not_seconds(tmp_path: Path) -> None:
    # Day serials count from 1899-12-30, so 45292 is 2024-01-01 (from memory; it matches
    # Unix time 0 = serial 25569, 19723 days before 2024-01-01 by Python's datetime).
    assert (datetime(2024, 1, 1) - datetime(1899, 12, 30)).days == 45292
    ten_s = 10.0 / 86400.0
    rows = [["time", "chamber"]] + [[f"{45292.5 + i * ten_s:.8f}", f"{20 + i}.5"]
                                    for i in range(4)]
    log = read_csv_log(_spreadsheet(rows, tmp_path / "serial.csv"))
    np.testing.assert_allclose(log.time_s, [0.0, 10.0, 20.0, 30.0], atol=1e-3)
    np.testing.assert_allclose(log.chamber_c, [20.5, 21.5, 22.5, 23.5])
    assert log.start_epoch == pytest.approx(
        datetime(2024, 1, 1, 12, tzinfo=UTC).timestamp(), abs=1e-3)


def test_minutes_from_the_time_header() -> None:
    log = parse_csv_log("time (min),chamber\n0,20\n1.5,21\n", "x.csv")
    np.testing.assert_allclose(log.time_s, [0.0, 90.0])


def test_tab_separated_written_by_the_csv_module(tmp_path: Path) -> None:
    path = tmp_path / "tabs.tsv"
    with open(path, "w", newline="") as handle:
        writer = csv.writer(handle, dialect="excel-tab")
        writer.writerows([["time", "temperature"], ["0", "20"], ["5", "20.5"]])
    log = read_csv_log(path)
    np.testing.assert_allclose(log.chamber_c, [20.0, 20.5])


def test_unknown_time_form_is_one_clear_line() -> None:
    with pytest.raises(FileProblems) as caught:
        parse_csv_log("time,chamber\nnoon,20\nlater,21\n", "x.csv")
    (problem,) = caught.value.problems
    assert problem.line == 2 and "no form I know" in problem.message


def test_import_command_refuses_a_contradiction(tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "f.csv"
    path.write_text("time,chamber (°F)\n0,212\n10,213\n")
    profile = Path(__file__).resolve().parent.parent / "profiles" / "dry-run.toml"
    assert main(["import", str(path), "--against", str(profile), "--units", "C"]) == 1
    err = capsys.readouterr().err
    assert f"{path}:1" in err and "given as C" in err and "Traceback" not in err


def test_help_says_what_is_default() -> None:
    out = io.StringIO()
    with contextlib.redirect_stdout(out), pytest.raises(SystemExit):
        main(["import", "--help"])
    words = " ".join(out.getvalue().split())
    assert "default: from the header" in words  # --units
    assert "default: read from the first rows" in words  # --time-format
    assert "(default C)" not in words and "(default seconds)" not in words


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet='0123456789,.;-:T Z+\t\n"\r°Fé()', max_size=200),
       st.sampled_from(["time,chamber\n", "time;chamber (°F)\n", "Time (min)\tTemp\n", ""]))
def test_anything_under_a_header_is_a_log_or_problems(body: str, header: str) -> None:
    # Every guess the reader makes on its own must end in a log or in FileProblems.
    try:
        parse_csv_log(header + body, "fuzz.csv")
    except FileProblems:
        pass
