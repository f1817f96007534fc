"""Alarm and equalization thresholds: one table of keys shared by a profile's `[limits]`
and the kiln file's `[alarms]` (the profile wins where both set a key).

Values are written in the file's units (temperature differences in its degrees, rates in
its degrees per minute, durations as "5m"); inside they are kelvin, °C/s and seconds.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields, replace
from typing import Any

from tuikiln.drivers.checking import unknown_key
from tuikiln.units import Units, delta_to_c, finite, parse_duration

# kind: "delta" = temperature difference, "duration", "slope" = degrees per minute, "count"


@dataclass(frozen=True)
class LimitKey:
    name: str
    kind: str
    default: float
    """Default in kelvin, seconds or kelvin per minute."""
    help: str


LIMIT_KEYS: tuple[LimitKey, ...] = (
    LimitKey("band", "delta", 8.0, "± degrees around a hold's target that count as at temperature"),
    LimitKey("overshoot", "delta", 15.0, "degrees above the current target that raise an alarm"),
    LimitKey("hold_grace", "duration", 120.0, "how long a hold may be out of band before alarm"),
    LimitKey("reach_within", "duration", 3 * 3600.0, "a hold must reach its band within this"),
    LimitKey("behind", "delta", 40.0, "how far the temperature may lag a planned ramp"),
    LimitKey("behind_for", "duration", 900.0, "how long it may lag by more before alarm"),
    LimitKey("stall_for", "duration", 900.0, "no rise for this long at full output: alarm"),
    LimitKey("runaway", "delta", 40.0, "degrees above the setpoint, rising, heater off: alarm"),
    LimitKey("link_lost", "duration", 30.0, "no good reading for this long: alarm"),
    LimitKey("link_lost_safe", "duration", 120.0, "no good reading for this long: safe state"),
    LimitKey("pause_remind", "duration", 300.0, "repeat the operator alert this often"),
    LimitKey("pause_too_long", "duration", 3600.0, "a run paused longer than this alerts"),
    LimitKey("equalize_window", "duration", 120.0, "slope is fitted over this window"),
    LimitKey("equalize_slope", "slope", 0.5,
             "moving away from the target slower than this (degrees/min) counts as level"),
    LimitKey("equalize_confirm", "duration", 10.0, "level and in band for this long: equalized"),
)
LIMIT_NAMES = tuple(key.name for key in LIMIT_KEYS)
_BY_NAME = {key.name: key for key in LIMIT_KEYS}


@dataclass(frozen=True)
class Limits:
    """Resolved thresholds (kelvin, seconds, kelvin per minute)."""

    band: float = 8.0
    overshoot: float = 15.0
    hold_grace: float = 120.0
    reach_within: float = 3 * 3600.0
    behind: float = 40.0
    behind_for: float = 900.0
    stall_for: float = 900.0
    runaway: float = 40.0
    link_lost: float = 30.0
    link_lost_safe: float = 120.0
    pause_remind: float = 300.0
    pause_too_long: float = 3600.0
    equalize_window: float = 120.0
    equalize_slope: float = 0.5
    equalize_confirm: float = 10.0

    def merged(self, overrides: Mapping[str, float]) -> Limits:
        return replace(self, **{k: v for k, v in overrides.items() if k in LIMIT_NAMES})

    def as_dict(self) -> dict[str, float]:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def parse_limits(
    table: Any, units: Units, report: Callable[[tuple, str], None], where: tuple
) -> dict[str, float]:
    """Check a `[limits]` or `[alarms]` table; call `report(path, message)` per mistake."""
    if not isinstance(table, Mapping):
        report(where, f'"{where[-1]}" must be a table of thresholds such as "band = 15"')
        return {}
    values: dict[str, float] = {}
    for name, raw in table.items():
        key = _BY_NAME.get(name)
        if key is None:
            report(where + (name,), unknown_key(name, LIMIT_NAMES))
            continue
        try:
            values[name] = _parse_value(key, raw, units)
        except ValueError as exc:
            report(where + (name,), f'"{name}": {exc}')
    return values


def _parse_value(key: LimitKey, raw: Any, units: Units) -> float:
    if key.kind == "duration":
        seconds = parse_duration(raw)
        if seconds <= 0:
            raise ValueError("must be longer than zero")
        return seconds
    if isinstance(raw, bool) or not isinstance(raw, int | float):
        what = "degrees per minute" if key.kind == "slope" else "degrees"
        raise ValueError(f"needs a number of {what}, such as 15")
    if not finite(raw):
        raise ValueError("needs a finite number, such as 15")
    if raw <= 0:
        raise ValueError("must be more than zero")
    return delta_to_c(float(raw), units)
