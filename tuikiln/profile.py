"""Heat-treatment profiles: TOML files people write, checked line by line, loaded as an
immutable model in SI units (°C, seconds, °C per second, metres).

A profile is a list of steps; each step has exactly one of `ramp`, `hold`, `cool`, `pause`.
Every mistake is collected (not only the first) as a `Problem` with file and line.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from tuikiln.drivers.checking import suggest, unknown_key
from tuikiln.errors import FileProblems, Problem
from tuikiln.events import RATE, TEMPERATURE, Said, literal, say
from tuikiln.limits import parse_limits
from tuikiln.tomllines import LineMap, load_toml, read_text
from tuikiln.units import (
    ABSOLUTE_ZERO_C,
    ROOM_C,
    UNITS,
    Units,
    delta_to_c,
    finite,
    format_temp,
    parse_duration,
    parse_rate,
    parse_thickness,
    to_c,
)

HoldStart = Literal["reached", "equalized"]


@dataclass(frozen=True)
class Ramp:
    """Heat to `to_c` at `rate_c_per_s` (None: as fast as the oven goes)."""

    to_c: float
    rate_c_per_s: float | None
    line: int | None = None
    label: str = ""
    kind: str = field(default="ramp", init=False)


@dataclass(frozen=True)
class Hold:
    """Keep the previous target for `duration_s`, counted from `start`."""

    duration_s: float
    start: HoldStart = "reached"
    band_c: float | None = None
    line: int | None = None
    label: str = ""
    kind: str = field(default="hold", init=False)


@dataclass(frozen=True)
class Cool:
    """Cool to `to_c` at `rate_c_per_s` (None: heater off, free cooling)."""

    to_c: float
    rate_c_per_s: float | None
    line: int | None = None
    label: str = ""
    kind: str = field(default="cool", init=False)


@dataclass(frozen=True)
class Pause:
    """Wait for the operator (a quench, a load change) until acknowledged."""

    message: str
    line: int | None = None
    label: str = ""
    kind: str = field(default="pause", init=False)


Step = Ramp | Hold | Cool | Pause
STEP_KINDS = ("ramp", "hold", "cool", "pause")


@dataclass(frozen=True)
class Load:
    material: str | None = None
    thickness_m: float | None = None
    pieces: int | None = None
    thickness_text: str | None = None
    width_m: float | None = None
    """The part's width (the next size up from the thickness): the estimate then counts the
    heat taken in through the edges."""
    width_text: str | None = None
    wrap: str = "none"
    """ "none", or "foil": the part is sealed in a stainless foil packet (the equalization
    estimate then allows for the foil's low emissivity and the air gap inside it)."""


@dataclass(frozen=True)
class Profile:
    name: str
    units: Units
    steps: tuple[Step, ...]
    about: str = ""
    load: Load = Load()
    limits: Mapping[str, float] = field(default_factory=dict)
    """Threshold overrides from `[limits]` (kelvin / seconds), merged over the kiln's."""
    path: str | None = None
    source: str = ""
    """The file's text as it was loaded (stored with every run)."""

    @property
    def peak_c(self) -> float:
        return max((s.to_c for s in self.steps if isinstance(s, Ramp | Cool)), default=ROOM_C)


TOP_KEYS = ("name", "units", "about", "load", "limits", "step")
LOAD_KEYS = ("material", "thickness", "width", "pieces", "wrap")
WRAPS = ("none", "foil")
STEP_KEYS = {
    "ramp": ("ramp", "to", "label"),
    "hold": ("hold", "start", "band", "label"),
    "cool": ("cool", "to", "label"),
    "pause": ("pause", "label"),
}
ALL_STEP_KEYS = ("ramp", "hold", "cool", "pause", "to", "start", "band", "label")
HOLD_STARTS = ("reached", "equalized")


def load_profile(path: str | Path, *, max_c: float | None = None) -> Profile:
    """Read and check a profile file; raise FileProblems listing every mistake."""
    path = str(path)
    text, problems = read_text(path)
    if text is None:
        raise FileProblems(problems)
    return parse_profile(text, path, max_c=max_c)


def parse_profile(
    text: str, file: str = "<profile>", *, max_c: float | None = None, start_c: float = ROOM_C
) -> Profile:
    """Check profile text; raise FileProblems listing every mistake, or return the model."""
    data, problems = load_toml(text, file)
    if data is None:
        raise FileProblems(problems)
    checker = _Checker(file, LineMap(text), max_c)
    profile = checker.profile(data, text, start_c)
    if checker.problems:
        raise FileProblems(sorted(checker.problems, key=lambda p: (p.line or 0)))
    assert profile is not None
    return profile


class _Checker:
    def __init__(self, file: str, lines: LineMap, max_c: float | None) -> None:
        self.file = file
        self.lines = lines
        self.max_c = max_c
        self.problems: list[Problem] = []
        self.units: Units = "C"

    def report(self, path: tuple, message: str) -> None:
        self.problems.append(Problem(self.file, self.lines.line(path), message))

    def profile(self, data: dict[str, Any], text: str, start_c: float) -> Profile | None:
        for key in data:
            if key not in TOP_KEYS:
                self.report((key,), unknown_key(key, TOP_KEYS))
        units = data.get("units")
        if units is None:
            self.report((), 'the profile needs units = "C" or units = "F" '
                        "(the units of its temperatures)")
        elif not isinstance(units, str) or units.upper() not in UNITS:
            self.report(("units",), f'unknown units {units!r}: write "C" or "F"')
        else:
            self.units = units.upper()
        name = data.get("name", Path(self.file).stem)
        if not isinstance(name, str) or not name.strip():
            self.report(("name",), '"name" must be some text, such as "O1 harden"')
            name = Path(self.file).stem
        about = data.get("about", "")
        if not isinstance(about, str):
            self.report(("about",), '"about" must be text')
            about = ""
        load = self.load(data.get("load", {}))
        limits = parse_limits(data.get("limits", {}), self.units, self.report, ("limits",))
        steps = self.steps(data.get("step"), start_c)
        if units is None or self.problems:
            return None
        return Profile(
            name=name.strip(),
            units=self.units,
            steps=tuple(steps),
            about=about.strip(),
            load=load,
            limits=limits,
            path=self.file,
            source=text,
        )

    def load(self, table: Any) -> Load:
        if not isinstance(table, Mapping):
            self.report(("load",), '"load" must be a table: [load] with material, thickness')
            return Load()
        for key in table:
            if key not in LOAD_KEYS:
                self.report(("load", key), unknown_key(key, LOAD_KEYS))
        material = table.get("material")
        if material is not None and not isinstance(material, str):
            self.report(("load", "material"), '"material" must be text, such as "AISI O1"')
            material = None
        thickness_m = None
        thickness = table.get("thickness")
        if thickness is not None:
            try:
                thickness_m = parse_thickness(thickness)
            except ValueError as exc:
                self.report(("load", "thickness"), f'"thickness": {exc}')
        width_m = None
        width = table.get("width")
        if width is not None:
            try:
                width_m = parse_thickness(width)
            except ValueError as exc:
                self.report(("load", "width"),
                            f'"width": {str(exc).replace("thickness", "width")}')
        pieces = table.get("pieces")
        if pieces is not None and (isinstance(pieces, bool) or not isinstance(pieces, int)
                                   or pieces < 1):
            self.report(("load", "pieces"), '"pieces" must be a whole number, 1 or more')
            pieces = None
        wrap = table.get("wrap", "none")
        if not isinstance(wrap, str) or wrap not in WRAPS:
            shown = f'"{wrap}"' if isinstance(wrap, str) else "that"
            self.report(("load", "wrap"), f'"wrap" must be "none" or "foil", not {shown}'
                        f"{suggest(wrap, WRAPS) if isinstance(wrap, str) else ''}")
            wrap = "none"
        return Load(material, thickness_m, pieces, thickness if thickness_m else None,
                    width_m, width if width_m else None, wrap)

    def steps(self, raw: Any, start_c: float) -> list[Step]:
        if raw is None or raw == []:
            self.report((), "the profile has no steps: add at least one [[step]] table")
            return []
        if not isinstance(raw, list) or not all(isinstance(s, Mapping) for s in raw):
            self.report(("step",), 'steps must be written as [[step]] tables')
            return []
        steps: list[Step] = []
        current = start_c
        for index, table in enumerate(raw):
            step = self.step(index, table, current)
            if step is None:
                # Keep checking later steps against the best guess of the temperature.
                target = table.get("to")
                if (isinstance(target, int | float) and not isinstance(target, bool)
                        and finite(target)):
                    current = to_c(target, self.units)
                continue
            steps.append(step)
            if isinstance(step, Ramp | Cool):
                current = step.to_c
        return steps

    def step(self, index: int, table: Mapping[str, Any], before_c: float) -> Step | None:
        where = ("step", index)
        number = index + 1
        line = self.lines.line(where)
        kinds = [k for k in STEP_KINDS if k in table]
        for key in table:
            if key not in ALL_STEP_KEYS:
                self.report(where + (key,),
                            f'step {number}: unknown key "{key}"{suggest(key, ALL_STEP_KEYS)}')
        if len(kinds) != 1:
            found = " and ".join(f'"{k}"' for k in kinds) if kinds else "none"
            self.report(where, f"step {number}: a step needs exactly one of "
                        f'"ramp", "hold", "cool" or "pause" (found {found})')
            return None
        kind = kinds[0]
        for key in table:
            if key in ALL_STEP_KEYS and key not in STEP_KEYS[kind]:
                self.report(where + (key,), f'step {number}: "{key}" does not belong in a {kind}')
        label = table.get("label", "")
        if not isinstance(label, str):
            self.report(where + ("label",), f'step {number}: "label" must be text')
            label = ""
        before = len(self.problems)
        if kind in ("ramp", "cool"):
            step = self.moving_step(kind, number, where, table, before_c, line, label)
        elif kind == "hold":
            step = self.hold_step(number, where, table, line, label)
        else:
            message = table["pause"]
            if not isinstance(message, str) or not message.strip():
                self.report(where + ("pause",), f'step {number}: "pause" needs a message for the '
                            'operator, such as "Quench the blades, then acknowledge"')
                return None
            step = Pause(message.strip(), line, label)
        return step if len(self.problems) == before else None

    def moving_step(self, kind: str, number: int, where: tuple, table: Mapping[str, Any],
                    before_c: float, line: int | None, label: str) -> Step | None:
        raw_rate = table[kind]
        rate: float | None = None
        if kind == "cool" and isinstance(raw_rate, str) and raw_rate.strip().lower() == "free":
            rate = None
        elif kind == "cool" and isinstance(raw_rate, str) and raw_rate.strip().lower() == "max":
            self.report(where + (kind,), f'step {number}: "cool" takes "free" (heater off) or a '
                        'rate such as "200/h"')
        else:
            try:
                rate = parse_rate(raw_rate, self.units)
            except ValueError:
                choices = ('"free" (heater off) or a rate such as "200/h" or "5/min"'
                           if kind == "cool" else 'a rate such as "400/h" or "10/min", or "max"')
                self.report(where + (kind,), f'step {number}: "{kind}" takes {choices}, '
                            f"not {raw_rate!r}")
        target = table.get("to")
        if target is None:
            self.report(where, f'step {number}: a {kind} needs "to", the temperature to reach')
            return None
        if isinstance(target, bool) or not isinstance(target, int | float) or not finite(
                target):
            self.report(where + ("to",), f'step {number}: "to" must be a number of degrees')
            return None
        to = to_c(float(target), self.units)
        u = self.units
        if to < ABSOLUTE_ZERO_C:
            self.report(where + ("to",), f"step {number}: {target} °{u} is below absolute zero")
            return None
        if self.max_c is not None and to > self.max_c + 1e-9:
            self.report(where + ("to",), f"step {number}: {target} °{u} is above the kiln's "
                        f"maximum of {format_temp(self.max_c, u)}")
        if kind == "ramp" and to <= before_c + 1e-9:
            self.report(where + ("to",), f"step {number}: a ramp must go up, but {target} °{u} is "
                        f"not above the {format_temp(before_c, u)} before it (use \"cool\")")
        if kind == "cool" and to >= before_c - 1e-9:
            self.report(where + ("to",), f"step {number}: a cool must go down, but {target} °{u} "
                        f"is not below the {format_temp(before_c, u)} before it (use \"ramp\")")
        if kind == "ramp":
            return Ramp(to, rate, line, label)
        return Cool(to, rate, line, label)

    def hold_step(self, number: int, where: tuple, table: Mapping[str, Any],
                  line: int | None, label: str) -> Hold | None:
        duration = 0.0
        try:
            duration = parse_duration(table["hold"])
            if duration <= 0:
                raise ValueError("it must be longer than zero")
        except ValueError:
            self.report(where + ("hold",), f'step {number}: "hold" needs a duration such as '
                        f'"15m", "2h" or "1h30m" (got {table["hold"]!r})')
        start = table.get("start", "reached")
        if start not in HOLD_STARTS:
            self.report(where + ("start",), f'step {number}: "start" must be "reached" or '
                        f'"equalized", not {start!r}{suggest(str(start), HOLD_STARTS)}')
            start = "reached"
        band = table.get("band")
        band_c = None
        if band is not None:
            if (isinstance(band, bool) or not isinstance(band, int | float)
                    or not finite(band) or band <= 0):
                self.report(where + ("band",), f'step {number}: "band" must be a number of '
                            "degrees above zero, such as 10")
            else:
                band_c = delta_to_c(float(band), self.units)
        return Hold(duration, start, band_c, line, label)


def describe_step(step: Step, units: Units) -> str:
    """A step in plain words, e.g. 'ramp at 400°F/h to 1200 °F'."""
    return describe_step_said(step).text(units)


def describe_step_said(step: Step) -> Said:
    """The same words with the temperature and rate kept as numbers (an event's detail)."""
    from tuikiln.units import format_duration

    if isinstance(step, Ramp | Cool):
        verb = "heat" if isinstance(step, Ramp) else "cool"
        fast = "as fast as the oven goes" if isinstance(step, Ramp) else "with the heater off"
        if step.rate_c_per_s is None:
            return say(f"{verb} {fast} to {{to}}", to=(TEMPERATURE, step.to_c))
        return say(f"{verb} at {{rate}} to {{to}}", rate=(RATE, step.rate_c_per_s),
                   to=(TEMPERATURE, step.to_c))
    if isinstance(step, Hold):
        when = "once the load has evened out" if step.start == "equalized" else "once reached"
        return Said(literal(f"hold {format_duration(step.duration_s)} {when}"))
    return Said("wait for you: " + literal(step.message))
