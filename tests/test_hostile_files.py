"""Hostile files: random and mutated input at every file parser (property-based).

Each parser must give its documented clear error (FileProblems, MapError, a problem list)
or accept the input; never another exception, never a hang. Checkers that catch their own
bugs ("could not check ...") count as failures here: that message is a traceback in disguise.

Example counts stay small so the suite is quick; TUIKILN_FUZZ_EXAMPLES=N raises every
parser's count to N for a long run. Counts per parser are printed in the session summary.
"""

from __future__ import annotations

import contextlib
import math
import os
import signal
from collections import Counter
from collections.abc import Iterator
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.conftest import FUZZ_TALLY
from tuikiln.analysis.csvlog import CsvLayout, parse_csv_log
from tuikiln.drivers.maps import MapError, parse_map
from tuikiln.errors import FileProblems
from tuikiln.kiln import Kiln, parse_kiln
from tuikiln.profile import Profile, parse_profile
from tuikiln.simulator.config import check_sim_settings

# ---- shared by the hostile tests ---------------------------------------------------------

FUZZ_EXAMPLES = int(os.environ.get("TUIKILN_FUZZ_EXAMPLES", "0") or 0)
TALLY: Counter[str] = FUZZ_TALLY
"""Examples run per parser, printed at the end of the session (tests/conftest.py)."""
HANG_S = 5.0  # one parse of a few KiB taking this long is a hang


def examples(default: int) -> int:
    return FUZZ_EXAMPLES or default


def fuzz(default: int) -> Any:
    """Hypothesis settings: modest count, no per-example deadline (no_hang guards hangs)."""
    return settings(max_examples=examples(default), deadline=None, database=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.function_scoped_fixture])


@contextlib.contextmanager
def no_hang(what: str, seconds: float = HANG_S) -> Iterator[None]:
    """Fails the example if the block runs longer than `seconds` (SIGALRM, main thread)."""

    def expired(signum: int, frame: Any) -> None:
        raise AssertionError(f"{what}: still running after {seconds:g} s (a hang)")

    previous = signal.signal(signal.SIGALRM, expired)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


# ---- TOML text, good and bad -------------------------------------------------------------

_text = st.text(st.characters(blacklist_categories=("Cs",)), max_size=30)
_floats = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                    st.sampled_from([0.0, -0.0, 1e308, -1e308, 5e-324, 1e-9]))
_scalars = st.one_of(
    st.integers(-(2**63), 2**63 - 1), st.sampled_from([0, 1, -1, 247, 248, 65535, 65536]),
    _floats, st.booleans(), _text,
    st.sampled_from(['"C"', '"F"', '"max"', '"free"', '"15m"', '"400/h"', '"sim"',
                     '"modbus"', '"lines"', '"csv"', '"json"', '"/dev/null"', '"generic-pid"',
                     '""', '"1h30m"', '"0s"', '"-5m"', '"4 mm"', "1979-05-27T07:32:00Z",
                     "07:32:00", '"reached"', '"equalized"']).map(lambda s: RawToml(s)),
)


class RawToml(str):
    """Already TOML text (written as it is)."""


def toml_value(value: Any) -> str:
    if isinstance(value, RawToml):
        return str(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        out = ['"']
        for ch in value:
            if ch in '"\\':
                out.append("\\" + ch)
            elif ord(ch) < 0x20 or ord(ch) == 0x7F:
                out.append(f"\\u{ord(ch):04x}")
            else:
                out.append(ch)
        return "".join(out) + '"'
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        inner = ", ".join(f"{toml_key(k)} = {toml_value(v)}" for k, v in value.items())
        return "{ " + inner + " }"
    raise TypeError(value)


def toml_key(key: str) -> str:
    if key and all(c.isascii() and (c.isalnum() or c in "_-") for c in key):
        return key
    return toml_value(key)


KEYS_SEEN = ["fc", "address", "scale", "units", "field", "unit", "to", "kind", "at", "for", "x"]
toml_values = st.recursive(
    _scalars,
    lambda inner: st.one_of(st.lists(inner, max_size=4),
                            st.dictionaries(st.sampled_from(KEYS_SEEN), inner, max_size=4)),
    max_leaves=8,
)
_keys = st.one_of(
    st.sampled_from(["name", "units", "max", "kind", "port", "baud", "address", "map", "poll",
                     "timeout", "ramp", "hold", "cool", "pause", "to", "start", "band", "label",
                     "host", "username", "password_file", "password_env", "prefix", "id",
                     "commands", "on", "run", "format", "header", "channels", "chamber",
                     "load", "fc", "scale", "open", "bits", "speed", "seed", "fault",
                     "thickness", "material", "pieces", "overshoot", "hold_grace", *KEYS_SEEN]),
    st.from_regex(r"[A-Za-z_][A-Za-z0-9_-]{0,8}", fullmatch=True),
)
_headers = st.sampled_from([
    "[device]", "[alarms]", "[mqtt]", "[[hook]]", "[[step]]", "[load]", "[limits]", "[read]",
    "[write]", "[read.channels]", "[device.channels]", "[device.load]", "[device.noise]",
    "[[device.fault]]", "[step]", "[[device]]", "[device.channels.chamber]", "[x.y.z]",
])
_junk_chars = st.text(st.sampled_from('[]{}="\'#\n,.\\ \t0123456789abcxyz-+:\x00\u00e9'),
                      min_size=1, max_size=6)


@st.composite
def mutated(draw: st.DrawFn, good: list[str]) -> str:
    """A good file with a few damaging edits: lines lost, doubled, values swapped, junk."""
    lines = draw(st.sampled_from(good)).splitlines()
    for _ in range(draw(st.integers(1, 5))):
        op = draw(st.sampled_from(["value", "value", "insert", "header", "delete", "dup",
                                   "chars", "swap"]))
        at = draw(st.integers(0, max(0, len(lines) - 1)))
        if op == "value" and lines:
            key, sep, _ = lines[at].partition("=")
            if sep and not key.strip().startswith("["):
                lines[at] = f"{key}= {toml_value(draw(toml_values))}"
        elif op == "insert":
            lines.insert(at, f"{toml_key(draw(_keys))} = {toml_value(draw(toml_values))}")
        elif op == "header":
            lines.insert(at, draw(_headers))
        elif op == "delete" and lines:
            del lines[at]
        elif op == "dup" and lines:
            lines.insert(at, lines[at])
        elif op == "swap" and len(lines) > 1:
            other = draw(st.integers(0, len(lines) - 1))
            lines[at], lines[other] = lines[other], lines[at]
        elif op == "chars" and lines:
            line = lines[at]
            pos = draw(st.integers(0, len(line)))
            cut = draw(st.integers(0, 3))
            lines[at] = line[:pos] + draw(_junk_chars) + line[pos + cut:]
    return "\n".join(lines) + "\n"


def random_or_mutated(good: list[str]) -> st.SearchStrategy[str]:
    anything = st.text(st.characters(blacklist_categories=("Cs",)), max_size=300)
    return st.one_of(mutated(good), mutated(good), anything)


# ---- profiles ----------------------------------------------------------------------------

GOOD_PROFILES = [
    # the design note's example (invented numbers for a demo of the file format)
    '''name = "A2 harden, then temper twice"
units = "F"
about = "demo"
[load]
material = "AISI A2"
thickness = "4 mm"
pieces = 2
[limits]
band = 15
overshoot = 25
[[step]]
ramp = "400/h"
to = 1200
[[step]]
hold = "15m"
start = "equalized"
[[step]]
ramp = "max"
to = 1750
[[step]]
hold = "30m"
band = 10
[[step]]
pause = "Quench, then acknowledge"
[[step]]
cool = "free"
to = 150
''',
    '''name = "temper"
units = "C"
[[step]]
ramp = "10/min"
to = 200
label = "up"
[[step]]
hold = "1h30m"
[[step]]
cool = "100/h"
to = 50
''',
]


@fuzz(150)
@given(text=random_or_mutated(GOOD_PROFILES),
       max_c=st.one_of(st.none(), st.floats(-500, 3000)))
def test_profile_parser_gives_problems_or_a_profile(text: str, max_c: float | None) -> None:
    TALLY["profile"] += 1
    with no_hang("parse_profile"):
        try:
            profile = parse_profile(text, "hostile.toml", max_c=max_c)
        except FileProblems as exc:
            assert exc.problems and all(p.message and p.file == "hostile.toml"
                                        for p in exc.problems)
            assert "Traceback" not in str(exc)
            return
    assert isinstance(profile, Profile) and profile.steps
    for step in profile.steps:  # what was accepted is usable: finite numbers only
        for name in ("to_c", "duration_s", "rate_c_per_s", "band_c"):
            value = getattr(step, name, None)
            assert value is None or math.isfinite(value), (name, value)
    assert all(math.isfinite(v) for v in profile.limits.values())


def test_profile_parser_refuses_deep_nesting_and_huge_numbers() -> None:
    # tomllib recurses per nesting level and Python refuses ints over 4300 digits: both were
    # RecursionError / ValueError tracebacks before tomllines.load_toml caught them
    for text in ("x = " + "[" * 5000, "x = " + "{a=" * 3000, "x = " + "1" * 5000,
                 'units = "C"\n[[step]]\nhold = "' + "9" * 400 + 'h"\n',
                 'units = "C"\n[limits]\nband = nan\novershoot = inf\n[[step]]\nhold = "1h"\n'):
        with pytest.raises(FileProblems) as caught:
            parse_profile(text, "deep.toml")
        assert str(caught.value).startswith("deep.toml")


# ---- kiln files --------------------------------------------------------------------------

GOOD_KILNS = [
    '''name = "Bench oven"
units = "F"
max = 2100
on_restart = "hold"
[device]
kind = "sim"
speed = 60
seed = 3
[device.load]
thickness_mm = 6
[[device.fault]]
at = "20m"
kind = "door-open"
for = "45s"
[alarms]
band = 15
link_lost = "1m"
''',
    '''name = "Modbus oven"
units = "C"
max = 1200
[device]
kind = "modbus"
port = "/dev/ttyUSB0"
baud = 9600
address = 1
map = "generic-pid"
poll = 2
[alarms]
overshoot = 20
[mqtt]
host = "127.0.0.1"
port = 1883
username = "kiln"
password_env = "KILN_PW"
prefix = "tuikiln"
id = "bench-oven"
commands = true
[[hook]]
on = ["alarm", "end"]
run = ["true", "{message}"]
timeout = "10s"
''',
    '''name = "Thermometer"
units = "C"
max = 1100
bell = false
[device]
kind = "lines"
port = "/dev/ttyUSB1"
format = "csv"
header = true
timeout = 5
[device.channels]
chamber = { field = "T1" }
load = { field = 2, unit = "mV", thermocouple = "K", cold_junction = 23.0 }
''',
]
DISGUISED_CRASH = ("could not check", "cannot check", "could not read the simulator")


@fuzz(150)
@given(text=random_or_mutated(GOOD_KILNS))
def test_kiln_parser_gives_problems_or_a_kiln(text: str) -> None:
    TALLY["kiln"] += 1
    with no_hang("parse_kiln"):
        try:
            kiln = parse_kiln(text, "<kiln>")
        except FileProblems as exc:
            assert exc.problems and all(p.message for p in exc.problems)
            for problem in exc.problems:  # a checker's own bug, caught and shown as words
                assert not any(c in problem.message for c in DISGUISED_CRASH), problem
            return
    assert isinstance(kiln, Kiln)
    assert math.isfinite(kiln.max_c) and kiln.max_c > -273.15
    assert all(math.isfinite(v) for v in kiln.alarms.values())


def test_kiln_parser_refuses_non_finite_numbers() -> None:
    for text in ("max = nan\n", "max = inf\n", "[alarms]\nband = nan\n",
                 "[alarms]\novershoot = inf\n", 'units = "C"\nmax = 1e999\n'):
        with pytest.raises(FileProblems):
            parse_kiln(text, "<kiln>")


# ---- Modbus register maps ----------------------------------------------------------------

GOOD_MAPS = [
    open(os.path.join(os.path.dirname(__file__), "..", "drivers", "maps", name),
         encoding="utf-8").read()
    for name in ("sim.toml", "generic-pid.toml")
] + ['''name = "x"
max_gap = 2
[read]
chamber = { fc = 4, address = 10, type = "float32", word_order = "little", units = "F" }
status = { fc = 3, address = 3, bits = { sensor_fault = 0, running = 1 } }
[read.channels]
door = { fc = 3, address = 7, decimals = 1, units = "C" }
[write]
setpoint = { fc = 16, address = 20, type = "int32", scale = 0.1, units = "C", min = 0, max = 1200 }
''']


@fuzz(150)
@given(text=random_or_mutated(GOOD_MAPS))
def test_map_parser_gives_map_error_or_a_map(text: str) -> None:
    TALLY["modbus map"] += 1
    with no_hang("parse_map"):
        try:
            register_map = parse_map(text, "hostile-map.toml")
        except MapError as exc:
            assert exc.problems and all(p.startswith("hostile-map.toml") for p in exc.problems)
            return
    for block in register_map.blocks():  # a map that loads can be polled
        assert 1 <= block.count <= 125


def test_map_parser_refuses_deep_nesting_and_huge_integers() -> None:
    for text in ("x = " + "[" * 5000, "x = " + "1" * 5000):
        with pytest.raises(MapError):
            parse_map(text, "deep.toml")


# ---- CSV logs from other tools -----------------------------------------------------------

GOOD_CSV = "time,chamber,load\n0,20.5,20.1\n60,35.0,22.5\n120,50.25,30\n"
_csv_cells = st.one_of(
    st.sampled_from(["", "0", "-1", "1e308", "nan", "inf", "-inf", "20.5", "1,5", "OPEN",
                     "2024-03-01T14:05:00", "2024-03-01T14:05:00+01:00", '"', '""', "\x00",
                     "time", "chamber", " 60 ", "9" * 400]),
    st.text(st.characters(blacklist_categories=("Cs",)), max_size=12),
)


@st.composite
def csv_logs(draw: st.DrawFn) -> bytes:
    choice = draw(st.integers(0, 3))
    if choice == 0:
        return draw(st.binary(max_size=400))
    rows = [r.split(",") for r in GOOD_CSV.splitlines()]
    for _ in range(draw(st.integers(1, 6))):
        r = draw(st.integers(0, len(rows) - 1))
        if rows[r]:
            c = draw(st.integers(0, len(rows[r]) - 1))
            rows[r][c] = draw(_csv_cells)
        if draw(st.booleans()):
            rows.insert(r, draw(st.lists(_csv_cells, max_size=5)))
    sep = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    text = sep.join(",".join(row) for row in rows)
    prefix = draw(st.sampled_from([b"", b"\xef\xbb\xbf", b"\xff\xfe"]))
    return prefix + text.encode("utf-8")


_layouts = st.builds(
    CsvLayout, time_column=st.sampled_from(["time", "Time", "t"]),
    chamber_column=st.sampled_from(["chamber", "CHAMBER"]),
    load_column=st.sampled_from([None, "load"]), units=st.sampled_from(["C", "F"]),
    time_format=st.sampled_from(["seconds", "minutes", "iso", "%d/%m/%Y %H:%M:%S"]),
)


@fuzz(150)
@given(data=csv_logs(), layout=_layouts)
def test_csv_import_gives_problems_or_a_log(data: bytes, layout: CsvLayout) -> None:
    TALLY["csv import"] += 1
    with no_hang("parse_csv_log"):
        try:
            log = parse_csv_log(data, "other-tool.csv", layout)
        except FileProblems as exc:
            assert exc.problems and all(p.file == "other-tool.csv" for p in exc.problems)
            return
    assert len(log.time_s) == len(log.chamber_c) >= 1
    assert log.time_s[0] == 0.0


def test_csv_layout_mistakes_are_value_errors_in_words() -> None:
    for bad in (dict(units="K"), dict(time_format="hours"), dict(delimiter=";;")):
        with pytest.raises(ValueError, match="must be"):
            CsvLayout(**bad)  # type: ignore[arg-type]


# ---- simulator settings ------------------------------------------------------------------

_py_values = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(), _floats, _text,
              st.sampled_from(["sim", "max", "door-open", "tc-drift", "line-noise", "ssr",
                               "proportional", "15m", "1h30m", "-1s", "carbon steel"])),
    lambda inner: st.one_of(
        st.lists(inner, max_size=4),
        st.dictionaries(st.one_of(_keys, st.sampled_from([
            "heater_w", "wall_layers", "thickness_mm", "layers", "chamber_c", "resolution_c",
            "rate_c_per_h", "share", "control", "keep_settings", "material", "emissivity"])),
            inner, max_size=5)),
    max_leaves=12,
)


@st.composite
def sim_tables(draw: st.DrawFn) -> Any:
    device = draw(st.dictionaries(st.sampled_from([
        "kind", "speed", "seed", "room", "control", "baud", "address", "load", "noise",
        "fault", "heater_w", "cycle_s", "kp", "setpoint_max", "wall_layers", "bogus"]),
        _py_values, max_size=8))
    if draw(st.booleans()):
        device["fault"] = draw(st.lists(st.dictionaries(st.sampled_from(
            ["at", "kind", "for", "rate_c_per_h", "share", "x"]), _py_values, max_size=5),
            max_size=3))
    if draw(st.booleans()):
        return {"device": device}
    return draw(st.one_of(st.just(device), _py_values))


@fuzz(120)
@given(table=sim_tables())
def test_sim_settings_checker_gives_problems_or_settings(table: Any) -> None:
    TALLY["simulator settings"] += 1
    with no_hang("check_sim_settings"):
        config, problems = check_sim_settings(table)
    assert isinstance(problems, list)
    for path, message in problems:
        assert isinstance(path, tuple) and isinstance(message, str) and message
        assert "could not read the simulator settings" not in message, message
    assert (config is None) == bool(problems)


def test_sim_material_that_is_not_text_is_a_plain_problem() -> None:
    _, problems = check_sim_settings({"device": {"load": {"material": []}}})
    assert problems and problems[0][0] == ("device", "load", "material")
