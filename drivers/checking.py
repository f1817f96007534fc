"""Checking a settings table against a declared table of its keys.

Every settings table a user writes (the kiln file's top level, `[device]`, `[mqtt]`,
`[[hook]]`) is declared as a tuple of `Setting`s: the key, what kind of value it takes, its
default, its range or choices and an example. `check_table` does what each hand-written
checker used to do in its own words: unknown keys with a "did you mean", wrong types, values
out of range, missing keys. What is special to a table (a port that must parse, a password
file's mode) stays as code beside its table.

Problems are `(key path, message)` pairs and the checker never raises, so `tuikiln.kiln`
can give each its line with `LineMap`. This module lives in drivers/ because drivers may
import nothing of tuikiln while tuikiln may import drivers; the simulator imports nothing of
ours and keeps its own table-driven checker (simulator/config.py).
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

KeyPath = tuple[str | int, ...]
Problems = list[tuple[KeyPath, str]]

KINDS = ("number", "whole", "text", "flag", "choice", "table", "any")


def suggest(word: object, choices: Iterable[str], cutoff: float = 0.6) -> str:
    """' (did you mean "ramp"?)' or '': the one "did you mean" of the project."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=cutoff)
    return f' (did you mean "{close[0]}"?)' if close else ""


def unknown_key(key: object, known: Iterable[str]) -> str:
    return f'unknown key "{key}"{suggest(key, known)}'


@dataclass(frozen=True)
class Setting:
    """One key of a settings table and what it accepts."""

    key: str
    kind: str = "any"
    """number, whole (number), text, flag (true/false), choice, table, or any (checked by code)."""
    default: Any = None
    low: float | None = None
    high: float | None = None
    choices: tuple[str, ...] = ()
    any_case: bool = False
    """Choices compared without case and given back as written in `choices`."""
    example: str = ""
    """Shown after "such as" when the value is wrong."""
    missing: str = ""
    """When set, the key is required and this is the message when it is left out."""
    strip: bool = False
    """Text: give it back stripped, and blank text is wrong (a name, a host)."""

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"unknown setting kind {self.kind!r}")


def shown(value: object) -> str:
    """A value as a message shows it: text as Python writes it, tables and lists by name."""
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, Mapping):
        return "a table"
    if isinstance(value, list):
        return "a list"
    return f"{value:g}" if isinstance(value, float) else str(value)


def check_value(setting: Setting, value: Any) -> tuple[Any, str | None]:
    """(the value, None) when `value` fits `setting`, else (its default, what is wrong)."""
    key, kind = setting.key, setting.kind
    such_as = f", such as {setting.example}" if setting.example else ""
    if kind in ("number", "whole"):
        what = "a whole number" if kind == "whole" else "a number"
        ok = isinstance(value, int | float) and not isinstance(value, bool)
        if ok and kind == "whole" and not float(value).is_integer():
            ok = False
        if not ok or not math.isfinite(value):
            span = ""
            if setting.low is not None and setting.high is not None:
                span = f" from {setting.low:g} to {setting.high:g}"
            return setting.default, f'"{key}" must be {what}{span}, not {shown(value)}'
        low, high = setting.low, setting.high
        if (low is not None and value < low) or (high is not None and value > high):
            if low is not None and high is not None:
                span = f"from {low:g} to {high:g}"
            else:
                span = f"at least {low:g}" if low is not None else f"at most {high:g}"
            return setting.default, f'"{key}" must be {span}, not {value:g}'
        return (int(value) if kind == "whole" else value), None
    if kind == "text":
        # A separator may be a space, so only `strip` settings refuse blank text.
        if not isinstance(value, str) or not value or (setting.strip and not value.strip()):
            return setting.default, f'"{key}" must be text in quotes{such_as}'
        return (value.strip() if setting.strip else value), None
    if kind == "flag":
        if not isinstance(value, bool):
            return setting.default, f'"{key}" must be true or false (no quotes)'
        return value, None
    if kind == "choice":
        for choice in setting.choices:
            if value == choice or (setting.any_case and isinstance(value, str)
                                   and value.upper() == choice.upper()):
                return choice, None
        listed = ", ".join(f'"{c}"' for c in setting.choices)
        hint = suggest(value, setting.choices) if isinstance(value, str) else ""
        return setting.default, f'"{key}" must be one of {listed}, not {shown(value)}{hint}'
    if kind == "table" and not isinstance(value, Mapping):
        return setting.default, f'"{key}" must be a table{such_as}'
    return value, None


def check_table(
    table: Mapping[str, Any],
    settings: Sequence[Setting],
    where: KeyPath,
    problems: Problems,
    *,
    also: Iterable[str] = (),
) -> dict[str, Any]:
    """Every setting's value (its default where absent or wrong); mistakes go to `problems`.

    Keys neither in `settings` nor in `also` (keys some code checks) are unknown keys.
    """
    known = [s.key for s in settings] + list(also)
    for key in table:
        if key not in known:
            problems.append(((*where, key), unknown_key(key, known)))
    values: dict[str, Any] = {}
    for setting in settings:
        if setting.key not in table:
            if setting.missing:
                problems.append(((*where, setting.key), setting.missing))
            values[setting.key] = setting.default
            continue
        value, message = check_value(setting, table[setting.key])
        if message:
            problems.append(((*where, setting.key), message))
        values[setting.key] = value
    return values
