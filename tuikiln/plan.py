"""The planned curve: setpoint against time, each step's planned start and end, the total.

Steps whose length is only known at run time (a `max` ramp, the wait before an `equalized`
hold's clock starts, a `free` cool, a `pause`) are marked open-ended and counted at their
known minimum: zero for the first three's wait and for a pause, the hold time for a hold.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tuikiln.profile import Cool, Hold, Load, Profile, Ramp, Step
from tuikiln.units import ROOM_C


@dataclass(frozen=True)
class PlannedStep:
    index: int
    step: Step
    start_s: float
    end_s: float
    from_c: float
    to_c: float
    open_ended: bool

    @property
    def kind(self) -> str:
        return self.step.kind

    @property
    def duration_s(self) -> float:
        return self.end_s - self.start_s


@dataclass(frozen=True)
class Plan:
    profile: Profile
    start_c: float
    steps: tuple[PlannedStep, ...]
    times_s: np.ndarray
    """Breakpoints of the piecewise-linear planned setpoint (seconds from the start)."""
    setpoints_c: np.ndarray

    @property
    def total_s(self) -> float:
        return float(self.steps[-1].end_s) if self.steps else 0.0

    @property
    def peak_c(self) -> float:
        return float(self.setpoints_c.max())

    @property
    def open_ended(self) -> bool:
        return any(s.open_ended for s in self.steps)

    def setpoint_at(self, t_s: float | np.ndarray) -> float | np.ndarray:
        """The planned setpoint at `t_s` seconds from the start (held flat past the end)."""
        return np.interp(t_s, self.times_s, self.setpoints_c)

    def sample(self, every_s: float) -> tuple[np.ndarray, np.ndarray]:
        """The curve at a fixed interval, always including the end."""
        t = np.arange(0.0, self.total_s, every_s)
        t = np.append(t, self.total_s)
        return t, np.asarray(self.setpoint_at(t))


def step_duration_s(step: Step, from_c: float) -> tuple[float, bool]:
    """(planned duration, open-ended) of one step starting at `from_c`."""
    if isinstance(step, Ramp | Cool):
        if step.rate_c_per_s is None:
            return 0.0, True
        return abs(step.to_c - from_c) / step.rate_c_per_s, False
    if isinstance(step, Hold):
        return step.duration_s, step.start == "equalized"
    return 0.0, True  # a pause lasts until the person acknowledges it


def plan_profile(profile: Profile, start_c: float = ROOM_C) -> Plan:
    steps: list[PlannedStep] = []
    times = [0.0]
    temps = [start_c]
    t = 0.0
    current = start_c
    for index, step in enumerate(profile.steps):
        duration, open_ended = step_duration_s(step, current)
        target = step.to_c if isinstance(step, Ramp | Cool) else current
        steps.append(PlannedStep(index, step, t, t + duration, current, target, open_ended))
        if isinstance(step, Ramp | Cool):
            if duration == 0.0:
                times.append(t)  # a jump: the setpoint goes to the target at once
                temps.append(target)
            else:
                times.append(t + duration)
                temps.append(target)
        elif duration > 0.0:
            times.append(t + duration)
            temps.append(current)
        t += duration
        current = target
    return Plan(profile, start_c, tuple(steps), np.array(times), np.array(temps))





def load_words(load: Load) -> str | None:
    """The profile's [load] in plain words, sizes as written: "2 pieces of AISI A2, 4 mm
    thick, 50 mm wide, wrapped in foil" (None when the profile says nothing of its load)."""
    if not (load.material or load.thickness_text or load.width_text or load.pieces
            or load.wrap != "none"):
        return None
    what = load.material or "steel not named"
    if load.pieces and load.pieces > 1:
        what = f"{load.pieces} pieces of {what}"
    parts = [what, f"{load.thickness_text} thick" if load.thickness_text
             else "thickness not given"]
    if load.width_text:
        parts.append(f"{load.width_text} wide")
    if load.wrap == "foil":
        parts.append("wrapped in foil")
    return ", ".join(parts)
