"""Read a temperature log written by another tool (CSV) into numpy arrays.

The file has a header row; which columns hold the time and the chamber (and optionally the
load) temperature, the temperature unit and how the time is written are given by a
`CsvLayout`. What it leaves out is read from the file (`csvsniff`): the text encoding (UTF-8,
with or without a byte-order mark, else Latin-1), the column separator, a decimal comma, the
unit in the header ("Chamber (°F)", "degF"), and the time's form (seconds, H:MM:SS, ISO 8601,
Unix time, spreadsheet day serials). Reading is all or nothing: either every data row is
good and a `CsvLog` comes back, or `FileProblems` lists the bad rows by line number (the
first `MAX_PROBLEMS` of them).
"""

from __future__ import annotations

import csv
import dataclasses
import functools
import io
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import TypeVar

import numpy as np

from tuikiln.analysis import csvsniff
from tuikiln.drivers.checking import suggest
from tuikiln.errors import FileProblems, Problem
from tuikiln.units import ABSOLUTE_ZERO_C, UNITS, f_to_c, symbol, to_c

MAX_PROBLEMS = 20
TIME_FORMATS = ("auto", "seconds", "minutes", "hms", "iso", "epoch", "days")
# Numeric time forms: seconds per unit ("epoch" is Unix time; "days" spreadsheet serials).
_SECONDS_PER = {"seconds": 1.0, "minutes": 60.0, "epoch": 1.0, "days": 86400.0}
# Column names tried when none is given: the usual ones, then `tuikiln export`'s own.
TIME_COLUMNS = ("time", "t_s", "timestamp", "datetime", "date/time", "elapsed")
CHAMBER_COLUMNS = ("chamber", "chamber_c", "temperature", "temp", "pv")
# The heater output in % (read only when asked for: `tuikiln learn`); not a temperature.
OUTPUT_COLUMNS = ("output_pct", "output", "out", "power", "mv")
# The first spreadsheet day (serial 0) is 1899-12-30; Unix time 0 is serial 25569.
_SERIAL_UNIX_DAY = 25569.0
_T = TypeVar("_T")
_Row = tuple[int, tuple[str, ...]]  # (first line of the row, its cells)


@dataclass(frozen=True)
class CsvLayout:
    """Where things are in the file and how they are written.

    `time_format` is "auto" (read from the file), "seconds" or "minutes" (from any start;
    the log is shifted to start at 0), "hms" (elapsed H:MM:SS), "iso" (ISO 8601 timestamps
    such as 2024-03-01T14:05:00 or ...+01:00), "epoch" (Unix seconds), "days" (spreadsheet
    day serials), or a strftime format such as "%d/%m/%Y %H:%M:%S". Timestamps without a
    zone are taken as they are, so a clock change inside a local-time log shows up as time
    going backwards (and is reported). None elsewhere means: read it from the file.
    """

    time_column: str | None = None
    chamber_column: str | None = None
    load_column: str | None = None
    output_column: str | None = None
    """The heater output column (%): None: not read; "auto": the first known name if any."""
    units: str | None = None
    time_format: str = "auto"
    delimiter: str | None = None
    encoding: str | None = None
    decimal: str | None = None

    def __post_init__(self) -> None:
        if self.units is not None and self.units not in UNITS:
            raise ValueError(f'the temperature unit must be "C" or "F", not "{self.units}"')
        if self.time_format not in TIME_FORMATS and "%" not in self.time_format:
            raise ValueError(
                'the time format must be "auto", "seconds", "minutes", "hms", "iso", "epoch", '
                f'"days" or a strftime format such as "%Y-%m-%d %H:%M:%S", not '
                f'"{self.time_format}"'
            )
        if self.delimiter is not None and len(self.delimiter) != 1:
            raise ValueError(f'the column separator must be one character, not "{self.delimiter}"')
        if self.decimal not in (None, ".", ","):
            raise ValueError(f'the decimal mark must be "." or ",", not "{self.decimal}"')
        if self.decimal == "," and self.delimiter == ",":
            raise ValueError('a decimal comma needs another column separator, such as ";"')


@dataclass(frozen=True, eq=False)
class CsvLog:
    """A complete log: seconds from the first row, temperatures in °C."""

    source: str
    time_s: np.ndarray
    chamber_c: np.ndarray
    load_c: np.ndarray | None
    output_pct: np.ndarray | None = None
    start_epoch: float | None = None
    """Unix time of the first row, when the file's times are absolute (epoch, day serials,
    ISO with a zone)."""
    units: str = "C"
    """The unit the file's temperatures were in (they are converted to °C)."""


class _Collector:
    """Gathers problems, keeping the first MAX_PROBLEMS and counting the rest."""

    def __init__(self, source: str) -> None:
        self.source = source
        self.kept: list[Problem] = []
        self.dropped = 0

    def add(self, line: int | None, message: str) -> None:
        if len(self.kept) < MAX_PROBLEMS:
            self.kept.append(Problem(self.source, line, message))
        else:
            self.dropped += 1

    def raise_if_any(self) -> None:
        if not self.kept:
            return
        problems = list(self.kept)
        if self.dropped:
            problems.append(Problem(self.source, None, f"and {self.dropped} more problems"))
        raise FileProblems(problems)


def read_csv_log(path: str | Path, layout: CsvLayout | None = None) -> CsvLog:
    """Read the CSV log at `path`; raises FileProblems for anything wrong with the file."""
    layout = layout or CsvLayout()
    source = str(path)
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        message = f"cannot be read: {exc.strerror or exc}"
        raise FileProblems([Problem(source, None, message)]) from None
    return parse_csv_log(data, source, layout)


def parse_csv_log(data: bytes | str, source: str, layout: CsvLayout | None = None) -> CsvLog:
    """Like `read_csv_log`, for the file's content; `source` names it in messages."""
    layout = layout or CsvLayout()
    text = _decode(data, source, layout.encoding)
    problems = _Collector(source)
    if layout.delimiter is None:
        first = [line for line in text.splitlines()[:50] if line.strip()][:3]
        layout = dataclasses.replace(layout, delimiter=csvsniff.delimiter(first))
    assert layout.delimiter is not None
    rows = _read_rows(text, layout.delimiter, problems)
    problems.raise_if_any()
    header_at = next((i for i, (_, cells) in enumerate(rows) if not _blank(cells)), None)
    if header_at is None:
        raise FileProblems([Problem(source, None, "is empty: expected a header row and data")])
    header_line, header = rows[header_at]
    columns = _find_columns(header, header_line, layout, problems)
    problems.raise_if_any()
    body = rows[header_at + 1 :]
    layout = _resolve(layout, header, header_line, columns, body, problems)
    problems.raise_if_any()
    return _parse_rows(body, columns, layout, problems)


def _decode(data: bytes | str, source: str, encoding: str | None) -> str:
    if isinstance(data, str):
        return data.removeprefix("\ufeff")
    if encoding is None:
        try:
            return data.decode("utf-8-sig")  # "-sig": a spreadsheet's byte-order mark goes
        except UnicodeDecodeError:
            # Not UTF-8: the usual other one for such logs (every byte is a Latin-1 letter).
            return data.decode("latin-1")
    if encoding.replace("_", "-").lower() in ("utf-8", "utf8"):
        encoding = "utf-8-sig"
    try:
        return data.decode(encoding)
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise FileProblems([Problem(source, line, f"is not {encoding} text (byte "
                                    f"0x{data[exc.start]:02x}); save it as UTF-8")]) from None
    except LookupError:
        raise FileProblems([Problem(source, None, f'"{encoding}" is not a text encoding '
                                    "Python knows (try utf-8 or latin-1)")]) from None


def _resolve(layout: CsvLayout, header: Sequence[str], line: int, columns: dict[str, int],
             body: list[_Row], problems: _Collector) -> CsvLayout:
    """Fill in what the layout left to the file: units, decimal mark, time form."""
    sample = [cells for _, cells in body[:200] if not _blank(cells)]

    def cells_of(role: str) -> list[str]:
        i = columns[role]
        return [cells[i] for cells in sample if i < len(cells)]

    said: dict[str, str] = {}
    for role in ("chamber", "load"):
        if role in columns:
            unit = csvsniff.header_units(header[columns[role]])
            if unit is not None:
                said[header[columns[role]].strip()] = unit
    units = layout.units
    if len(set(said.values())) > 1:
        listed = ", ".join(f'"{name}" in °{unit}' for name, unit in said.items())
        problems.add(line, f"the header gives different units ({listed}): correct the header")
    elif said:
        name, unit = next(iter(said.items()))
        if units is not None and units != unit:
            problems.add(line, f'the header says "{name}" is in °{unit}, but the unit was '
                         f"given as {units}: leave the unit out or correct the header")
        units = unit
    decimal = layout.decimal
    if decimal is None:
        temps = [c for role in ("chamber", "load") if role in columns for c in cells_of(role)]
        decimal = "," if layout.delimiter != "," and csvsniff.decimal_comma(temps) else "."
    time_format = layout.time_format
    if time_format == "auto" and sample:
        found = csvsniff.time_format(cells_of("time"), decimal)
        by_header = csvsniff.header_time_format(header[columns["time"]])
        if found is None:
            first = next((c.strip() for c in cells_of("time") if c.strip()), "")
            problems.add(line + 1, f'the time "{first}" is in no form I know (seconds, '
                         "H:MM:SS, ISO 8601, Unix time, spreadsheet days): give the time "
                         "format")
            found = "seconds"
        elif found == "seconds" and by_header is not None:
            found = by_header
        time_format = found
    names = {role: header[i].strip() for role, i in columns.items()}
    return dataclasses.replace(layout, units=units or "C", decimal=decimal,
                               time_format=time_format, time_column=names["time"],
                               chamber_column=names["chamber"],
                               load_column=names.get("load"),
                               output_column=names.get("output"))


def _read_rows(text: str, delimiter: str, problems: _Collector) -> list[_Row]:
    """(first line of the row, cells) for every row, blank ones included."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    cells_of: list[tuple[str, ...]] = []
    last_lines: list[int] = []  # a quoted field may hold line breaks: rows can span lines
    try:
        for cells in reader:
            # Tuples of strings drop out of the garbage collector's sight; a million lists
            # would make its passes cost more than the reading itself.
            cells_of.append(tuple(cells))
            last_lines.append(reader.line_num)
    except csv.Error as exc:
        problems.add(reader.line_num or 1, f"is not readable as CSV: {exc}")
    first_lines = [1, *(line + 1 for line in last_lines)][: len(cells_of)]
    return list(zip(first_lines, cells_of, strict=True))


def _blank(cells: Sequence[str]) -> bool:
    # The first test alone settles almost every data row; the join catches ",,," rows.
    return not ((cells and cells[0].strip()) or "".join(cells).strip())


def _find_columns(
    header: Sequence[str], line: int, layout: CsvLayout, problems: _Collector
) -> dict[str, int]:
    names = [cell.strip() for cell in header]
    bases = [csvsniff.base_name(n).casefold() for n in names]
    wanted = {"time": layout.time_column or _known(names, bases, TIME_COLUMNS),
              "chamber": layout.chamber_column or _known(names, bases, CHAMBER_COLUMNS)}
    if layout.load_column is not None:
        wanted["load"] = layout.load_column
    elif wanted["time"] == "t_s" and "load_c" in names:
        wanted["load"] = "load_c"  # `tuikiln export`'s own file reads back without options
    if layout.output_column == "auto":
        known = _known(names, bases, OUTPUT_COLUMNS)
        if known in names:
            wanted["output"] = known
    elif layout.output_column is not None:
        wanted["output"] = layout.output_column
    found: dict[str, int] = {}
    for role, name in wanted.items():
        exact = [i for i, n in enumerate(names) if n == name]
        if not exact:
            exact = [i for i, n in enumerate(names) if n.casefold() == name.casefold()]
        if not exact:
            exact = [i for i, b in enumerate(bases) if b == name.casefold()]
        if len(exact) == 1:
            found[role] = exact[0]
            continue
        if len(exact) > 1:
            problems.add(line, f'the header has more than one column "{name}"')
            continue
        listed = ", ".join(f'"{n}"' for n in names if n) or "none"
        message = f'no {role} column "{name}" (the columns are {listed})'
        problems.add(line, message + suggest(name, [n for n in names if n], cutoff=0.5))
    return found


def _known(names: list[str], bases: list[str], known: tuple[str, ...]) -> str:
    """The first known column name the header has (by its name without a unit)."""
    for name in known:
        for i, base in enumerate(bases):
            if base == name:
                return names[i]
    return known[0]


def _parse_rows(
    rows: list[_Row],
    columns: dict[str, int],
    layout: CsvLayout,
    problems: _Collector,
) -> CsvLog:
    data = [(line, cells) for line, cells in rows if not _blank(cells)]
    if not data:
        raise FileProblems([Problem(problems.source, None, "has a header but no data rows")])
    lines = [line for line, _ in data]
    parsed = _numbers_at_once(data, columns, layout)
    if parsed is None:
        parsed = _row_by_row(data, columns, layout, problems)
    seconds, temps, start = parsed
    for index in np.flatnonzero(np.diff(seconds) <= 0):
        problems.add(
            lines[index + 1],
            f"time is not after the previous row's (line {lines[index]}): the times must increase",
        )
    problems.raise_if_any()
    return CsvLog(
        source=problems.source,
        time_s=seconds,
        chamber_c=temps["chamber"],
        load_c=temps.get("load"),
        output_pct=temps.get("output"),
        start_epoch=start,
        units=layout.units or "C",
    )


# (seconds from the first row, temperatures in °C by role, Unix time of the first row)
_Parsed = tuple[np.ndarray, dict[str, np.ndarray], float | None]


def _numbers_at_once(
    data: list[_Row], columns: dict[str, int], layout: CsvLayout
) -> _Parsed | None:
    """The common case, a file of good numbers, in one numpy pass per column (a week of 1 s
    samples in about a second rather than several). None when anything looks wrong: the row by
    row reading then finds and names each problem."""
    if layout.time_format not in _SECONDS_PER:
        return None
    widest = max(columns.values())
    if any(len(cells) <= widest for _, cells in data):
        return None
    parsed: dict[str, np.ndarray] = {}
    comma = layout.decimal == ","
    try:
        for role, index in columns.items():
            texts = [cells[index] for _, cells in data]
            if comma:
                texts = [text.replace(",", ".") for text in texts]
            parsed[role] = np.array(texts, dtype=float)
    except ValueError:
        return None
    if not all(np.isfinite(values).all() for values in parsed.values()):
        return None
    raw = parsed.pop("time")
    seconds = raw * _SECONDS_PER[layout.time_format]
    temps = {
        role: values if layout.units == "C" or role == "output" else f_to_c(values)
        for role, values in parsed.items()
    }
    if any((values < ABSOLUTE_ZERO_C).any() for values in temps.values()):
        return None
    return seconds - seconds[0], temps, _epoch(float(raw[0]), layout.time_format)


def _epoch(first: float, time_format: str) -> float | None:
    if time_format == "epoch":
        return first
    if time_format == "days":
        return (first - _SERIAL_UNIX_DAY) * 86400.0
    return None


def _row_by_row(
    data: list[_Row],
    columns: dict[str, int],
    layout: CsvLayout,
    problems: _Collector,
) -> _Parsed:
    decimal = layout.decimal or "."
    parse_time = _time_parser(layout.time_format, decimal)
    lines: list[int] = []
    stamps: list[float | datetime] = []
    temps: dict[str, list[float]] = {role: [] for role in columns if role != "time"}
    # The output column is a percentage: read as a number, never converted from °F.
    unit_of = {role: "C" if role == "output" else layout.units or "C" for role in temps}
    for line, cells in data:
        wrong: list[str] = []
        stamp = _cell(cells, columns["time"], str(layout.time_column), parse_time, wrong)
        values = {
            role: _cell(
                cells,
                columns[role],
                _column_name(layout, role),
                functools.partial(_temperature, units=unit_of[role], decimal=decimal),
                wrong,
            )
            for role in temps
        }
        if wrong:
            problems.add(line, "; ".join(wrong))
            continue
        # Nothing is None here: `wrong` would have said so.
        lines.append(line)
        stamps.append(stamp)  # type: ignore[arg-type]
        for role, value in values.items():
            temps[role].append(value)  # type: ignore[arg-type]
    problems.raise_if_any()
    seconds, start = _seconds_from_start(stamps, lines, layout.time_format, problems)
    problems.raise_if_any()
    return (seconds, {role: np.array(values, dtype=float) for role, values in temps.items()},
            start)


def _column_name(layout: CsvLayout, role: str) -> str:
    if role == "output":
        return str(layout.output_column)
    return str(layout.chamber_column if role == "chamber" else layout.load_column)


def _cell(
    cells: Sequence[str], index: int, name: str, parse: Callable[[str], _T], wrong: list[str]
) -> _T | None:
    """Parse one cell, noting what is wrong with it in `wrong` instead of raising."""
    if index >= len(cells) or not cells[index].strip():
        wrong.append(f'"{name}" is empty')
        return None
    try:
        return parse(cells[index].strip())
    except ValueError as exc:
        wrong.append(f'"{name}": {exc}')
        return None


def _number(text: str, decimal: str = ".") -> float:
    if decimal == ",":
        if "." in text:
            raise ValueError(f'"{text}" has a decimal point, but this file writes decimals '
                             "with a comma")
        text = text.replace(",", ".")
    try:
        value = float(text)
    except ValueError:
        hint = (" (for a decimal comma, give the decimal mark as \",\" and another separator)"
                if "," in text else "")
        raise ValueError(f'"{text}" is not a number{hint}') from None
    if not math.isfinite(value):
        raise ValueError(f'"{text}" is not a number')
    return value


def _temperature(text: str, units: str, decimal: str = ".") -> float:
    celsius = to_c(_number(text, decimal), units)
    if celsius < ABSOLUTE_ZERO_C:
        raise ValueError(f"{text} {symbol(units)} is below absolute zero")
    return celsius


def _time_parser(time_format: str, decimal: str = ".") -> Callable[[str], float | datetime]:
    if time_format in _SECONDS_PER:
        return lambda text: _number(text, decimal)
    if time_format == "hms":
        return csvsniff.hms_seconds
    if time_format == "iso":

        def parse_iso(text: str) -> datetime:
            try:
                return datetime.fromisoformat(text)
            except ValueError:
                raise ValueError(
                    f'"{text}" is not an ISO 8601 time such as 2024-03-01T14:05:00'
                ) from None

        return parse_iso

    def parse_strftime(text: str) -> datetime:
        try:
            return datetime.strptime(text, time_format)
        except ValueError:
            raise ValueError(f'"{text}" does not match the time format "{time_format}"') from None

    return parse_strftime


def _seconds_from_start(
    stamps: list[float | datetime], lines: list[int], time_format: str, problems: _Collector
) -> tuple[np.ndarray, float | None]:
    if time_format in _SECONDS_PER or time_format == "hms":
        raw = np.array(stamps, dtype=float)
        values = raw * _SECONDS_PER.get(time_format, 1.0)
        return values - values[0], _epoch(float(raw[0]), time_format)
    dates: list[datetime] = stamps  # type: ignore[assignment]
    zoned = dates[0].tzinfo is not None
    seconds = np.empty(len(dates))
    for i, (line, stamp) in enumerate(zip(lines, dates, strict=True)):
        if (stamp.tzinfo is not None) != zoned:
            has = "has" if stamp.tzinfo is not None else "has no"
            problems.add(
                line, f"the time {has} a time zone, unlike the first row's (line {lines[0]})"
            )
            seconds[i] = math.nan
            continue
        seconds[i] = (stamp - dates[0]).total_seconds()
    return seconds, dates[0].timestamp() if zoned else None
