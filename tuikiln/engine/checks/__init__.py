"""Alarm checks in modules of their own: the one place an alarm rule is registered.

A check is a small class: a stable `code` (stored in logs, sent over MQTT: never rename
one), a `severity` ("warning", or "critical": the run drives the device safe and ends), a
`name` for people, and `judge(obs, temp)` that looks at one tick. Decorated with
`@alarm_check` it joins `ALARM_KINDS` (every alarm the engine knows, the built-in ones of
engine/alarms.py too), so the engine raises and clears it, the run log, screens, hooks and
MQTT carry it, and replay's what-if re-runs it, with no other file to touch. A module in
this package is found by itself; docs/CONTRIBUTING.md has the recipe.

`judge` returns what the tick says: a sentence (or True) raises the alarm with those words,
False clears it, None leaves it as it is (not enough seen yet). Like the rest of the domain
core, a check reads no clock (`obs.now` is the time) and imports neither Textual nor serial.
"""

from __future__ import annotations

import importlib
import pkgutil
from typing import TYPE_CHECKING, ClassVar

from tuikiln.events import Severity
from tuikiln.units import Units, delta_from_c, format_temp, symbol

if TYPE_CHECKING:
    from tuikiln.engine.alarms import AlarmRules, Observation
    from tuikiln.limits import Limits

WARNING = Severity.WARNING
CRITICAL = Severity.CRITICAL

ALARM_KINDS: dict[str, tuple[str, str]] = {}
"""code -> (severity, short name): every alarm, built-in and registered."""
CHECKS: dict[str, type[Check]] = {}
"""code -> the registered check class."""


class Check:
    """One alarm rule; one instance per run (it may remember what it saw)."""

    code: ClassVar[str]
    severity: ClassVar[str] = WARNING
    name: ClassVar[str]
    every_tick: ClassVar[bool] = False
    """False: judged every few seconds (enough for rules over minutes of history)."""
    needs_temperature: ClassVar[bool] = True
    """Judged only on ticks with a usable chamber temperature (`temp` is then a float)."""

    def __init__(self, limits: Limits, units: Units) -> None:
        self.limits = limits
        self.units = units

    def judge(self, obs: Observation, temp: float | None) -> str | bool | None:
        raise NotImplementedError

    # Words in the run's units, as the built-in alarms write them.
    def temp(self, celsius: float | None) -> str:
        return format_temp(celsius, self.units)

    def delta(self, kelvin: float) -> str:
        return f"{delta_from_c(kelvin, self.units):.0f} {symbol(self.units)}"


def alarm_check(cls: type[Check]) -> type[Check]:
    """Register a check (a class decorator)."""
    if cls.severity not in (WARNING, CRITICAL):
        raise ValueError(f"{cls.__name__}: severity must be {WARNING!r} or {CRITICAL!r}")
    if cls.code in ALARM_KINDS and CHECKS.get(cls.code) is not cls:
        raise ValueError(f"{cls.__name__}: alarm code {cls.code!r} is taken")
    CHECKS[cls.code] = cls
    ALARM_KINDS[cls.code] = (cls.severity, cls.name)
    return cls


def forget(code: str) -> None:
    """Unregister a check (tests that register a toy one)."""
    if CHECKS.pop(code, None) is not None:
        ALARM_KINDS.pop(code, None)


def make_checks(limits: Limits, units: Units) -> list[Check]:
    return [cls(limits, units) for cls in CHECKS.values()]


def judge_all(rules: AlarmRules, obs: Observation, temp: float | None, slow: bool) -> None:
    """Let every registered check of `rules` judge this tick; raise and clear by its word."""
    for check in rules.checks:
        if (temp is None and check.needs_temperature) or not (slow or check.every_tick):
            continue
        verdict = check.judge(obs, temp)
        if verdict is None:
            continue
        words = verdict if isinstance(verdict, str) else check.name
        rules.set_alarm(check.code, bool(verdict), obs.now, words)


def _find_shipped_checks() -> None:
    for module in pkgutil.iter_modules(__path__):
        importlib.import_module(f"{__name__}.{module.name}")


_find_shipped_checks()
