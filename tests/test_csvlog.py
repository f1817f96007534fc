"""Reading temperature logs written by other tools (CSV)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tuikiln.analysis.csvlog import MAX_PROBLEMS, CsvLayout, CsvLog, parse_csv_log, read_csv_log
from tuikiln.errors import FileProblems


def problems_of(data: bytes | str, layout: CsvLayout | None = None) -> list[tuple[int | None, str]]:
    with pytest.raises(FileProblems) as caught:
        parse_csv_log(data, "log.csv", layout)
    assert all(p.file == "log.csv" for p in caught.value.problems)
    return [(p.line, p.message) for p in caught.value.problems]


def test_seconds_with_bom_blank_lines_and_load(tmp_path: Path) -> None:
    path = tmp_path / "oven.csv"
    # A byte-order mark as spreadsheet "CSV UTF-8" exports write (Unicode standard: U+FEFF).
    path.write_bytes(
        b"\xef\xbb\xbftime, chamber ,load\r\n100,20.5,19\r\n\r\n101,21.0,19.5\r\n103,22,20\r\n"
    )
    log = read_csv_log(path, CsvLayout(load_column="load"))
    assert isinstance(log, CsvLog) and log.source == str(path)
    np.testing.assert_array_equal(log.time_s, [0.0, 1.0, 3.0])
    np.testing.assert_array_equal(log.chamber_c, [20.5, 21.0, 22.0])
    assert log.load_c is not None
    np.testing.assert_array_equal(log.load_c, [19.0, 19.5, 20.0])


def test_minutes_and_fahrenheit() -> None:
    # t/°C = (t/°F - 32) / 1.8 (NIST SP 811, appendix B): 32 °F = 0 °C, 212 °F = 100 °C.
    layout = CsvLayout("t", "air", units="F", time_format="minutes")
    log = parse_csv_log("t,air\n0,32\n1.5,212\n", "x.csv", layout)
    np.testing.assert_allclose(log.time_s, [0.0, 90.0])
    np.testing.assert_allclose(log.chamber_c, [0.0, 100.0])
    assert log.load_c is None


def test_iso_timestamps_with_zone() -> None:
    # ISO 8601: "Z" is UTC; 14:00+01:00 is 13:00Z.
    text = "time,chamber\n2024-03-01T13:00:00Z,20\n2024-03-01T14:00:30+01:00,25\n"
    log = parse_csv_log(text, "x.csv", CsvLayout(time_format="iso"))
    np.testing.assert_allclose(log.time_s, [0.0, 30.0])


def test_iso_timestamps_without_zone_across_midnight() -> None:
    text = "time,chamber\n2024-03-01 23:59:50,20\n2024-03-02 00:00:10,25\n"
    log = parse_csv_log(text, "x.csv", CsvLayout(time_format="iso"))
    np.testing.assert_allclose(log.time_s, [0.0, 20.0])


def test_strftime_format() -> None:
    text = "when;temp\n01/03/2024 10:00:00;400\n01/03/2024 10:02:00;401.5\n"
    layout = CsvLayout("when", "temp", time_format="%d/%m/%Y %H:%M:%S", delimiter=";")
    log = parse_csv_log(text, "x.csv", layout)
    np.testing.assert_allclose(log.time_s, [0.0, 120.0])
    np.testing.assert_allclose(log.chamber_c, [400.0, 401.5])


def test_bad_rows_are_reported_with_their_lines() -> None:
    text = (
        "time,chamber,load\n"  # line 1
        "0,20,20\n"  # line 2
        "\n"  # line 3: blank, skipped
        "1,hot,20\n"  # line 4
        "2,21,21\n"  # line 5
        "3,,\n"  # line 6: both temperatures empty
        '4,"22",22\n'  # line 7: quoted is fine
        "5\n"  # line 8: too short
    )
    found = problems_of(text, CsvLayout(load_column="load"))
    assert [line for line, _ in found] == [4, 6, 8]
    assert '"hot" is not a number' in found[0][1]
    assert '"chamber" is empty' in found[1][1] and '"load" is empty' in found[1][1]


def test_line_numbers_count_quoted_newlines() -> None:
    # RFC 4180: a quoted field may hold a line break, so a row can span two lines.
    text = 'time,chamber,note\n0,20,"two\nlines"\n1,x,ok\n'
    assert [line for line, _ in problems_of(text)] == [4]


def test_problems_stop_at_the_limit() -> None:
    text = "time,chamber\n" + "".join(f"{i},bad\n" for i in range(50))
    found = problems_of(text)
    assert len(found) == MAX_PROBLEMS + 1
    assert found[0][0] == 2 and found[MAX_PROBLEMS - 1][0] == MAX_PROBLEMS + 1
    assert found[-1] == (None, f"and {50 - MAX_PROBLEMS} more problems")


def test_times_must_increase() -> None:
    text = "time,chamber\n0,20\n10,21\n10,22\n5,23\n"
    found = problems_of(text)
    assert [line for line, _ in found] == [4, 5]
    assert "line 3" in found[0][1]


def test_wrong_column_name_gets_a_suggestion() -> None:
    text = "Time,Chamber_Temp,Load_Temp\n0,20,20\n"
    ((line, message),) = problems_of(text, CsvLayout(chamber_column="chamber temp"))
    assert line == 1
    assert '"Time"' in message and '"Load_Temp"' in message  # lists what is there
    assert 'did you mean "Chamber_Temp"?' in message


def test_column_names_match_regardless_of_case() -> None:
    log = parse_csv_log("TIME,Chamber\n0,20\n", "x.csv")
    np.testing.assert_array_equal(log.chamber_c, [20.0])


def test_mixed_time_zones_are_refused() -> None:
    text = "time,chamber\n2024-03-01T13:00:00Z,20\n2024-03-01T13:01:00,25\n"
    ((line, message),) = problems_of(text, CsvLayout(time_format="iso"))
    assert line == 3 and "time zone" in message


def test_bad_timestamp_says_what_was_expected() -> None:
    ((line, message),) = problems_of(
        "time,chamber\n2024-03-01 10:00,20\nlater,21\n", CsvLayout(time_format="iso")
    )
    assert line == 3 and "ISO 8601" in message


def test_empty_and_header_only_files() -> None:
    assert problems_of(b"") == [(None, "is empty: expected a header row and data")]
    assert problems_of(b"\n\n") == [(None, "is empty: expected a header row and data")]
    assert problems_of(b"time,chamber\n\n") == [(None, "has a header but no data rows")]


def test_not_utf8_names_the_line() -> None:
    # 0xB0 is "°" in Latin-1/cp1252 but not valid UTF-8 on its own. Told it is UTF-8, the
    # reader names the line; left to itself it reads Latin-1 (tests/test_record_csv.py).
    ((line, message),) = problems_of(b"time,chamber\n0,20\n1,21\xb0\n",
                                     CsvLayout(encoding="utf-8"))
    assert line == 3 and "UTF-8" in message


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(FileProblems) as caught:
        read_csv_log(tmp_path / "nope.csv")
    (problem,) = caught.value.problems
    assert problem.line is None and "cannot be read" in problem.message


def test_layout_mistakes_are_plain_words() -> None:
    with pytest.raises(ValueError, match='"C" or "F"'):
        CsvLayout(units="K")
    with pytest.raises(ValueError, match="strftime"):
        CsvLayout(time_format="hh:mm")


@settings(max_examples=150, deadline=None)
@given(st.binary(max_size=300))
def test_random_bytes_never_raise_anything_but_file_problems(data: bytes) -> None:
    try:
        parse_csv_log(data, "fuzz.csv", CsvLayout(load_column="load"))
    except FileProblems:
        pass


@settings(max_examples=150, deadline=None)
@given(st.text(alphabet='0123456789,.-:T Z+\n"\r\x00é', max_size=200))
def test_random_rows_under_a_header_never_raise_anything_but_file_problems(body: str) -> None:
    for time_format in ("seconds", "iso", "%H:%M"):
        try:
            parse_csv_log(
                "time,chamber,load\n" + body,
                "fuzz.csv",
                CsvLayout(load_column="load", time_format=time_format),
            )
        except FileProblems:
            pass
