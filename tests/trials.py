"""Profile trials: random valid profiles run on the in-process simulator at full speed.

Shared by tests/test_trials.py and tests/bench/trials.py (not collected: no test_ prefix).
A profile is drawn as steps in °C and written out in the profile's own units, so the parser,
the unit conversions and the engine are all in the trial. Pauses are answered by the trial
as a person would: when the run asks (an operator-needed event), not by auto-continue.
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from hypothesis import strategies as hs

from tuikiln import events as ev
from tuikiln.drivers.factory import open_device
from tuikiln.engine.host import settings_for
from tuikiln.engine.runner import RunEngine
from tuikiln.kiln import parse_kiln
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

KILN_MAX_C = 1100.0
ROOM_C = 20.0
TOP_C = KILN_MAX_C - 10.0   # "near the kiln max": a target 10 °C under it
COOL_FLOOR_C = 60.0         # the simulated oven takes hours to coast the last degrees to room

# A badly tuned controller: little proportional action and an integral far too fast overshoot
# a `max` ramp by tens of degrees below about 700 °C (found on our simulator's PID,
# simulator/controller.py; near its top the oven has too little power to overshoot).
OVERSHOOTING = "kp = 0.5\nti_s = 30\ntd_s = 0\n"

# fault -> (simulator fault table, the alarms any one of which is the right one). A welded
# relay near the kiln's maximum crosses it before it is far enough above the setpoint.
FAULTS: dict[str, tuple[str, frozenset[str]]] = {
    "relay-welded": ('kind = "relay-welded"\n', frozenset({"heat-stuck-on", "over-kiln-max"})),
    "tc-open": ('kind = "tc-open"\n', frozenset({"sensor-bad"})),
    "link-drop": ('kind = "link-drop"\nfor = "15m"\n', frozenset({"no-link-too-long"})),
}


@dataclass
class Trial:
    steps: list[dict] = field(default_factory=list)
    units: str = "C"
    seed: int = 1
    """The simulator's seed: its reading noise."""

    def toml(self) -> str:
        lines = [f'name = "trial"\nunits = "{self.units}"']
        for step in self.steps:
            lines.append("[[step]]")
            for key, value in step.items():
                lines.append(f"{key} = {self._value(key, value)}")
        return "\n".join(lines) + "\n"

    def _value(self, key: str, value: object) -> str:
        f = self.units == "F"
        if key == "to":
            return f"{value * 9 / 5 + 32 if f else value:.0f}"
        if key in ("ramp", "cool") and isinstance(value, float):
            return f'"{value * 9 / 5 if f else value:.0f}/h"'
        if key == "band":
            return f"{value * 9 / 5 if f else value:.0f}"
        return f'"{value}"'


@hs.composite
def trials(draw: hs.DrawFn, *, max_steps: int = 5) -> Trial:
    """Any order of ramps (max or rated), holds (either start rule, an own band or not),
    cools (rated or free) and pauses, from near room to near the kiln's maximum."""
    trial = Trial(units=draw(hs.sampled_from(["C", "F"])), seed=draw(hs.integers(1, 999)))
    now_c = ROOM_C
    for _ in range(draw(hs.integers(1, max_steps))):
        kinds = ["hold", "pause"]
        if now_c < TOP_C - 20:
            kinds.append("ramp")
        if now_c > COOL_FLOOR_C + 20:
            kinds.append("cool")
        kind = draw(hs.sampled_from(kinds))
        if kind == "ramp":
            near = draw(hs.sampled_from(["any", "room", "top"]))
            low = now_c + 20 if near != "top" else max(now_c + 20, TOP_C - 60)
            high = min(TOP_C, low + 30) if near == "room" else TOP_C
            to = float(draw(hs.integers(int(low), int(high))))
            # A sensible rate is one the oven can follow: the simulated 1.8 kW oven manages
            # about 600 °C/h to 800 °C but less near its top (a faster ramp rightly lags).
            rates = ["max", 150.0, 300.0] + ([600.0] if to <= 800 else [])
            rate = draw(hs.sampled_from(rates))
            trial.steps.append({"ramp": rate, "to": to})
            now_c = to
        elif kind == "cool":
            to = float(draw(hs.integers(int(COOL_FLOOR_C), int(now_c - 20))))
            rate = draw(hs.sampled_from(["free", 100.0, 300.0, 600.0]))
            trial.steps.append({"cool": rate, "to": to})
            now_c = to
        elif kind == "hold":
            step: dict = {"hold": f"{draw(hs.integers(1, 15))}m",
                          "start": draw(hs.sampled_from(["reached", "equalized"]))}
            if draw(hs.booleans()):
                step["band"] = float(draw(hs.integers(5, 15)))
            trial.steps.append(step)
        else:
            trial.steps.append({"pause": "trial: act, then acknowledge"})
    return trial


class Person:
    """A sink that keeps the events and answers a pause when the run asks for it."""

    def __init__(self) -> None:
        self.events: list = []
        self.engine: RunEngine | None = None

    def event(self, event) -> None:  # noqa: ANN001
        self.events.append(event)
        if (event.kind == ev.OPERATOR_NEEDED and self.engine is not None
                and not event.detail.get("reminder")):
            self.engine.command("ack", None, "trial person")

    def state(self, state) -> None:  # noqa: ANN001
        pass

    def reading(self, sample) -> None:  # noqa: ANN001
        pass

    def raised(self) -> list[str]:
        return [e.detail["alarm"] for e in self.events if e.kind == ev.ALARM_RAISED]


@dataclass
class Result:
    outcome: str
    raised: list[str]
    events: list


async def run_profile(text: str, *, seed: int = 1, faults: str = "", device_extra: str = "",
                      folder: Path | None = None) -> Result:
    """One run of `text` on the in-process simulator at full speed."""
    with tempfile.TemporaryDirectory() as scratch:
        where = Path(folder or scratch)
        kiln = parse_kiln(f'name = "Trial oven"\nunits = "C"\nmax = {KILN_MAX_C}\n[device]\n'
                          f'kind = "sim"\nseed = {seed}\n{device_extra}{faults}',
                          str(where / "kiln.toml"))
        profile = parse_profile(text, "trial.toml", max_c=kiln.max_c)
        device = open_device(kiln.device, kiln.base_dir, speed=0.0)
        person = Person()
        async with device:
            engine = RunEngine(device, profile, settings_for(kiln, profile),
                               runlog=RunLog.in_folder(where), sinks=[person])
            person.engine = engine
            outcome = await engine.run()
        return Result(outcome, person.raised(), person.events)
