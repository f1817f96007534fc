"""The declared settings tables (tuikiln.drivers.checking) and the kiln file they check."""

from __future__ import annotations

import difflib

import pytest

from tuikiln.drivers.checking import Setting, check_table, check_value, suggest
from tuikiln.errors import FileProblems
from tuikiln.kiln import parse_kiln


def test_suggest_follows_difflib() -> None:
    # difflib (Python's standard library) is the reference for which word is close.
    choices = ["address", "baud", "parity"]
    for word in ("adress", "bawd", "xyz", "PARITY"):
        close = difflib.get_close_matches(word, choices, n=1, cutoff=0.6)
        expected = f' (did you mean "{close[0]}"?)' if close else ""
        assert suggest(word, choices) == expected


@pytest.mark.parametrize(("setting", "value", "message"), [
    (Setting("baud", "whole", 9600, 300, 1_000_000), 9600.5,
     '"baud" must be a whole number from 300 to 1e+06, not 9600.5'),
    (Setting("poll", "number", 2.0, 0.05, 3600.0), 0.0, '"poll" must be from 0.05 to 3600, not 0'),
    (Setting("poll", "number", 2.0, 0.05), -1, '"poll" must be at least 0.05, not -1'),
    (Setting("poll", "number", 2.0), "2s", "\"poll\" must be a number, not '2s'"),
    (Setting("poll", "number", 2.0), float("nan"), '"poll" must be a number, not nan'),
    (Setting("bell", "flag", True), "yes", '"bell" must be true or false (no quotes)'),
    (Setting("host", "text", strip=True, example='"127.0.0.1"'), "  ",
     '"host" must be text in quotes, such as "127.0.0.1"'),
    (Setting("on_restart", "choice", "hold", choices=("continue", "hold", "end")), "hodl",
     '"on_restart" must be one of "continue", "hold", "end", not \'hodl\' (did you mean '
     '"hold"?)'),
    (Setting("device", "table", example="[device]"), 3,
     '"device" must be a table, such as [device]'),
])
def test_each_kind_says_what_is_wrong_and_falls_back(setting: Setting, value: object,
                                                      message: str) -> None:
    got, problem = check_value(setting, value)
    assert problem == message
    assert got == setting.default


def test_good_values_come_back_as_the_table_declares() -> None:
    assert check_value(Setting("parity", "choice", choices=("N", "E"), any_case=True), "e") \
        == ("E", None)
    assert check_value(Setting("baud", "whole", 9600, 300, 1e6), 19200.0) == (19200, None)
    assert check_value(Setting("separator", "text"), " ") == (" ", None)  # a space separates


def test_check_table_reports_unknown_missing_and_wrong_keys_at_once() -> None:
    table = {"prot": 1, "port": "x"}
    problems: list = []
    values = check_table(table, (Setting("port", "whole", 1883, 1, 65535),
                                 Setting("host", "text", missing='"host" is missing')),
                         ("mqtt",), problems)
    assert values == {"port": 1883, "host": None}
    assert dict(problems) == {
        ("mqtt", "prot"): 'unknown key "prot" (did you mean "port"?)',
        ("mqtt", "port"): "\"port\" must be a whole number from 1 to 65535, not 'x'",
        ("mqtt", "host"): '"host" is missing',
    }


def test_a_kiln_file_names_each_mistake_with_its_line() -> None:
    text = ('name = "Bench"\nunits = "K"\nbell = "yes"\non_restart = "agian"\n'
            'colour = "red"\n[device]\nkind = "modbus"\nport = "/dev/ttyUSB0"\n'
            'map = "generic-pid"\nbaud = 9601\naddress = 300\nmax = 1000\n')
    with pytest.raises(FileProblems) as caught:
        parse_kiln(text, "kiln.toml")
    lines = {p.line: p.message for p in caught.value.problems}
    assert lines[2].startswith('"units" must be one of "C", "F"')
    assert lines[3] == '"bell" must be true or false (no quotes)'
    assert lines[4] == "\"on_restart\" must be one of \"continue\", \"hold\", \"end\", not 'agian'"
    assert lines[5] == 'unknown key "colour"'
    assert "did you mean 9600" in lines[10]
    assert lines[11] == '"address" must be from 1 to 247, not 300'
    assert 'unknown key "max" (did you mean "map"?)' == lines[12]  # max sits under [device]
