"""Work out how a CSV log is written when the person did not say: what a file shows.

Each guess looks at the header and the first data rows only, and each can be overruled by an
option; an option that contradicts what the file plainly says (a header in °F read as °C, a
decimal comma in a comma-separated file) is refused rather than obeyed.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

DELIMITERS = (",", ";", "\t", "|")

# A header's temperature unit: "°F", "℉", "(F)", "[F]", "degF", "deg F", "in F" and the same
# for C. Kelvin is not a unit people log ovens in.
_UNIT_MARKS = {
    "F": re.compile(r"°\s*F\b|℉|[(\[]\s*F\s*[)\]]|\bdeg\.?\s*F\b|\bdegF\b|\bin\s+F$", re.I),
    "C": re.compile(r"°\s*C\b|℃|[(\[]\s*C\s*[)\]]|\bdeg\.?\s*C\b|\bdegC\b|\bin\s+C$", re.I),
}
# "(s)", "[sec]", "(min)" after a time column's name.
_TIME_UNITS = {
    "seconds": re.compile(r"[(\[]\s*(s|sec|secs|seconds)\s*[)\]]", re.I),
    "minutes": re.compile(r"[(\[]\s*(m|min|mins|minutes)\s*[)\]]", re.I),
}
_SUFFIX = re.compile(r"\s*([(\[][^)\]]*[)\]]|°\s*[CF]|℉|℃|\bdeg\.?\s*[CF]\b|\bin\s+[CF])\s*$",
                     re.I)
_HMS = re.compile(r"^\d{1,3}:\d{2}:\d{2}(\.\d+)?$")
_ISO = re.compile(r"^\d{4}-\d{2}-\d{2}([T ]\d{1,2}:\d{2}.*)?$")
_COMMA_DECIMAL = re.compile(r"^[+-]?\d+,\d+$")

# Spreadsheet day serials (days since 1899-12-30): 20000 is 1954, 100000 is 2173. A log
# whose times sit in that range and move by less than half a unit a row is in days, not
# seconds (a 1 s log reads 0.0000116 a row).
SERIAL_DAYS = (20000.0, 100000.0)
# Unix time from 2001-09-09 (1e9 s) to 5138 (1e11 s): seconds since 1970.
EPOCH_SECONDS = (1e9, 1e11)


def delimiter(lines: Sequence[str]) -> str:
    """The separator that splits the header and the first data line into the same number of
    cells (most cells wins); "," when nothing splits them."""
    header = lines[0] if lines else ""
    rest = [line for line in lines[1:3] if line.strip()]
    best, most = ",", 0
    for candidate in DELIMITERS:
        count = _outside_quotes(header, candidate)
        if count == 0 or any(_outside_quotes(line, candidate) != count for line in rest):
            continue
        if count > most:
            best, most = candidate, count
    if most == 0:  # ragged rows: the header alone decides
        counts = {c: _outside_quotes(header, c) for c in DELIMITERS}
        best = max(counts, key=lambda c: counts[c]) if max(counts.values()) else ","
    return best


def _outside_quotes(line: str, char: str) -> int:
    count, quoted = 0, False
    for c in line:
        if c == '"':
            quoted = not quoted
        elif c == char and not quoted:
            count += 1
    return count


def decimal_comma(cells: Sequence[str]) -> bool:
    """The numbers are written with a decimal comma ("21,5")."""
    return any(_COMMA_DECIMAL.match(cell.strip()) for cell in cells)


def base_name(header: str) -> str:
    """A column's name without its unit: "Chamber (°F)" -> "Chamber"."""
    name = header.strip()
    while True:
        stripped = _SUFFIX.sub("", name).strip()
        if stripped == name or not stripped:
            return name
        name = stripped


def header_units(header: str) -> str | None:
    """"C" or "F" when the column's header names its unit, else None."""
    found = {unit for unit, mark in _UNIT_MARKS.items() if mark.search(header)}
    return found.pop() if len(found) == 1 else None


def header_time_format(header: str) -> str | None:
    for name, mark in _TIME_UNITS.items():
        if mark.search(header):
            return name
    return None


def time_format(cells: Sequence[str], decimal: str) -> str | None:
    """"hms", "iso", "days", "epoch" or "seconds" from the first time cells; None: unknown."""
    first = [c.strip() for c in cells if c.strip()][:3]
    if not first:
        return None
    if all(_HMS.match(c) for c in first):
        return "hms"
    if all(_ISO.match(c) for c in first):
        return "iso"
    try:
        values = [float(c.replace(",", ".") if decimal == "," else c) for c in first]
    except ValueError:
        return None
    if SERIAL_DAYS[0] <= values[0] < SERIAL_DAYS[1] and len(values) >= 2 and all(
            abs(b - a) < 0.5 for a, b in zip(values, values[1:], strict=False)):
        return "days"
    if EPOCH_SECONDS[0] <= values[0] < EPOCH_SECONDS[1]:
        return "epoch"
    return "seconds"


def hms_seconds(text: str) -> float:
    """H:MM:SS (hours may run past 24: elapsed time) as seconds."""
    if not _HMS.match(text):
        raise ValueError(f'"{text}" is not a time such as 1:05:30 (H:MM:SS)')
    hours, minutes, seconds = text.split(":")
    if int(minutes) >= 60 or float(seconds) >= 60:
        raise ValueError(f'"{text}" is not a time such as 1:05:30 (H:MM:SS)')
    return int(hours) * 3600.0 + int(minutes) * 60.0 + float(seconds)
