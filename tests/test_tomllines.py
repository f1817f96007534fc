"""The one TOML line mapper (tuikiln.drivers.tomllines.LineMap) against tomllib.

tomllib (Python's standard library, a TOML 1.0 parser) is the outside reference: every
generated document must parse there, and every key path tomllib reports must map to the line
the generator wrote it on.
"""

from __future__ import annotations

import tomllib
from typing import Any

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tuikiln.drivers.maps import MapError, parse_map
from tuikiln.drivers.tomllines import LineMap
from tuikiln.errors import FileProblems
from tuikiln.kiln import parse_kiln

# Lines that a line-by-line scan mistakes for headers or keys when they sit inside a
# string or stand alone as an array element.
TRICKY = ("[alarms]", "[[step]]", "band = 3", 'x = "y"', "# not a comment", '\\"""', "'")

bare_keys = st.from_regex(r"[a-z][a-z0-9_\-]{0,6}", fullmatch=True).filter(
    lambda k: k not in ("step", "hook") and not k.startswith("table"))
quoted_keys = st.sampled_from(['"a.b"', '"with space"', "'lit.key'", '"tab\\tkey"'])
keys = st.one_of(bare_keys, bare_keys, quoted_keys)


def key_name(written: str) -> str:
    return next(iter(tomllib.loads(f"{written} = 1")))


@st.composite
def scalar(draw: Any) -> str:
    kind = draw(st.sampled_from(["int", "basic", "literal", "ml_basic", "ml_literal",
                                 "float", "bool", "date"]))
    tricky = draw(st.sampled_from(TRICKY))
    if kind == "int":
        return str(draw(st.integers(-1000, 1000)))
    if kind == "float":
        return "1.5e3"
    if kind == "bool":
        return "true"
    if kind == "date":
        return "1979-05-27 07:32:00"
    if kind == "basic":
        return '"' + tricky.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if kind == "literal":
        return "'" + tricky.replace("'", "") + "'"
    if kind == "ml_basic":
        return '"""\n' + tricky + '\nend ""\n"""'
    return "'''\n" + tricky.replace("'", "") + "\n'''"


class Doc:
    """A TOML text written line by line, with the line of every key path it holds."""

    def __init__(self) -> None:
        self.parts: list[str] = []
        self.expected: dict[tuple, int] = {}

    @property
    def line(self) -> int:
        return "".join(self.parts).count("\n") + 1

    def write(self, text: str) -> None:
        self.parts.append(text)

    def value(self, draw: Any, path: tuple, depth: int) -> None:
        shape = draw(st.sampled_from(["scalar", "scalar", "array", "inline"]
                                     if depth < 2 else ["scalar"]))
        if shape == "scalar":
            self.write(draw(scalar()))
        elif shape == "array":
            self.write("[")
            for index in range(draw(st.integers(0, 3))):
                if draw(st.booleans()):
                    self.write("  # a comment\n  ")
                self.expected[path + (index,)] = self.line
                self.value(draw, path + (index,), depth + 1)
                self.write(",\n" if draw(st.booleans()) else ", ")
            self.write("\n]" if draw(st.booleans()) else "]")
        else:
            self.write("{ ")
            names = draw(st.lists(keys, min_size=0, max_size=3, unique_by=key_name))
            for i, name in enumerate(names):
                self.expected[path + (key_name(name),)] = self.line
                self.write(f"{name} = ")
                self.value(draw, path + (key_name(name),), depth + 1)
                self.write(", " if i < len(names) - 1 else " ")
            self.write("}")

    def pairs(self, draw: Any, table: tuple) -> None:
        for name in draw(st.lists(keys, min_size=0, max_size=3, unique_by=key_name)):
            path = table + (key_name(name),)
            self.expected[path] = self.line
            self.write(f"{name} = ")
            self.value(draw, path, 0)
            self.write("  # trailing\n" if draw(st.booleans()) else "\n")


@st.composite
def documents(draw: Any) -> tuple[str, dict[tuple, int]]:
    doc = Doc()
    doc.pairs(draw, ())
    counts: dict[str, int] = {}
    for i in range(draw(st.integers(0, 3))):
        if draw(st.booleans()):
            name = draw(st.sampled_from(["step", "hook"]))
            index = counts.get(name, 0)
            counts[name] = index + 1
            doc.expected[(name, index)] = doc.line
            doc.write(f"[[{name}]]\n")
            table: tuple = (name, index)
        else:
            name = f"table{i}"
            doc.expected[(name,)] = doc.line
            doc.write(f"[{name}]\n")
            table = (name,)
        doc.pairs(draw, table)
    return "".join(doc.parts), doc.expected


def all_paths(value: Any, path: tuple = ()) -> list[tuple]:
    found = [path] if path else []
    if isinstance(value, dict):
        for key, inner in value.items():
            found += all_paths(inner, path + (key,))
    elif isinstance(value, list):
        for index, inner in enumerate(value):
            found += all_paths(inner, path + (index,))
    return found


@settings(max_examples=300, deadline=None, database=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(documents())
def test_every_key_tomllib_sees_maps_to_the_line_it_was_written_on(doc: Any) -> None:
    text, expected = doc
    data = tomllib.loads(text)  # the reference: the generator writes valid TOML only
    lines = LineMap(text)
    for path in all_paths(data):
        if path in (("step",), ("hook",)):
            continue  # an array of tables as a whole: no line of its own to check
        assert lines.lines.get(path) == expected[path], (path, text)
    assert set(expected) <= set(all_paths(data))  # the generator's bookkeeping is right


def test_a_header_inside_a_multi_line_string_is_not_a_header() -> None:
    # Found while merging the two mappers: the register-map scan took `[write]` inside the
    # text of `about` for a table, so the real [read] keys below were lost.
    text = ('about = """\nwritten for\n[write]\nsetpoint = 1\n"""\n'
            "[read]\nchamber = { fc = 3, address = 0, units = \"X\" }\n")
    lines = LineMap(text)
    assert ("write",) not in lines.lines
    assert lines.lines[("read", "chamber", "units")] == 7
    try:
        parse_map(text, "mine.toml")
    except MapError as exc:
        assert 'mine.toml:7: [read.chamber] units: must be "C" or "F"' in str(exc)
    else:
        raise AssertionError("the map's bad units were not found")


def test_an_array_element_alone_on_its_line_is_not_a_header() -> None:
    # The old line scan read `["OPEN"]` (the last element of a list, alone on its line) as
    # a table header, and every key after it moved into that table and lost its line.
    text = ('name = "Bench"\nmax = 1000\n[device]\nkind = "modbus"\nmatrix = [\n'
            '  ["OPEN"]\n]\nbaud = "fast"\n')
    assert LineMap(text).lines[("device", "baud")] == 8
    try:
        parse_kiln(text, "kiln.toml")
    except FileProblems as exc:
        assert any(p.line == 8 and "baud" in p.message for p in exc.problems), exc.problems
    else:
        raise AssertionError("the bad baud was not found")


def test_inline_array_of_tables_keeps_each_elements_line() -> None:
    text = 'step = [\n  { ramp = "max", to = 100 },\n  { hold = "15m" },\n]\n'
    lines = LineMap(text)
    assert lines.line(("step", 1, "hold")) == 3
    assert lines.line(("step", 0, "to")) == 2


def test_text_it_cannot_follow_keeps_what_it_found() -> None:
    lines = LineMap('a = 1\nb = "unclosed\nc = 3\n')
    assert lines.line(("a",)) == 1
    assert lines.line(("c",)) is None
