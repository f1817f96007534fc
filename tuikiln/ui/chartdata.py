"""From a run's samples and its plan to what the chart draws, in the units on show.

Pure functions (no Textual, no clock): the live screen, the replay screen and the profile
preview build their chart here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from tuikiln.plan import Plan
from tuikiln.ui.chartdraw import ChartSpec, Trace
from tuikiln.ui.runfeed import SampleBuffer, finite
from tuikiln.units import Units

WHOLE_RUN = "whole run"
LAST_HOUR = "last hour"
AHEAD_IN_LAST_HOUR_S = 900.0  # how much of the plan ahead the last-hour view shows
ROOM_AXIS_C = 0.0


def plan_ahead(plan: Plan, status: Mapping[str, Any], now: float) -> tuple[np.ndarray, np.ndarray]:
    """The rest of the plan laid out from `now` (°C): the current step ends when the engine
    expects it to, the later steps follow at their planned pace (open-ended ones at their
    known minimum). A pause waiting for the person keeps sliding with `now`."""
    index = status.get("step")
    if not isinstance(index, int) or not 0 <= index < len(plan.steps):
        return np.array([]), np.array([])
    step = plan.steps[index]
    to_next = finite(status.get("time_to_next_step_s"))
    end_at = now + (to_next if to_next is not None else 0.0)
    current = finite(status.get("setpoint_c"))
    if current is None:
        current = step.from_c
    later = plan.times_s >= step.end_s
    times = np.concatenate(([now, end_at], plan.times_s[later] - step.end_s + end_at))
    values = np.concatenate(([current, step.to_c], plan.setpoints_c[later]))
    return times, values


def view_range(zoom: str, started: float, now: float, ahead_end: float) -> tuple[float, float]:
    if zoom == LAST_HOUR:
        return max(started, now - 3600.0), now + AHEAD_IN_LAST_HOUR_S
    end = max(now, ahead_end)
    return started, max(end, started + 60.0)


def scale_for(units: Units) -> tuple[float, float]:
    """(scale, offset) turning °C into `units` (°F = °C x 1.8 + 32)."""
    return (1.8, 32.0) if units == "F" else (1.0, 0.0)


def extents(arrays_c: list[np.ndarray], units: Units) -> tuple[float, float]:
    """The axis must reach from room-ish zero to the top of these small arrays (the plan)."""
    values = [a for a in arrays_c if a.size and np.isfinite(a).any()]
    high_c = max((float(np.nanmax(a)) for a in values), default=100.0)
    low_c = min(min((float(np.nanmin(a)) for a in values), default=ROOM_AXIS_C), ROOM_AXIS_C)
    scale, offset = scale_for(units)
    return low_c * scale + offset, high_c * scale + offset


def live_chart(
    plan: Plan,
    samples: SampleBuffer,
    status: Mapping[str, Any] | None,
    started: float,
    now: float,
    units: Units,
    zoom: str = WHOLE_RUN,
    cursor: float | None = None,
    show_plan_ahead: bool = True,
) -> ChartSpec:
    """The chart of a run so far: chamber, load (or estimated core), setpoint, plan ahead."""
    t = samples.column("t")
    series: list[tuple[str, np.ndarray, bool]] = [("chamber", samples.column("chamber_c"), False)]
    if samples.has_values("load_c"):
        series.append(("load", samples.column("load_c"), False))
    if samples.has_values("core_c"):
        series.append(("core", samples.column("core_c"), False))
    series.append(("setpoint", samples.column("setpoint_c"), True))
    ahead_t, ahead_c = (plan_ahead(plan, status, now) if status and show_plan_ahead
                        else (np.array([]), np.array([])))
    t_start, t_end = view_range(zoom, started, now,
                                float(ahead_t[-1]) if ahead_t.size else now)
    traces = [Trace(role, t, values, dashed=dashed) for role, values, dashed in series]
    if ahead_t.size:
        traces.append(Trace("plan", ahead_t, ahead_c, dashed=True, max_gap_s=math.inf))
    y_low, y_high = extents([ahead_c, plan.setpoints_c], units)
    scale, offset = scale_for(units)
    return ChartSpec(t_start, t_end, y_low, y_high, traces, now=now, cursor=cursor,
                     t_origin=started, y_scale=scale, y_offset=offset)


def replay_chart(
    plan: Plan,
    samples: SampleBuffer,
    started: float,
    ended: float,
    units: Units,
    step_starts: Mapping[int, float],
    cursor: float | None,
    window: tuple[float, float] | None = None,
) -> ChartSpec:
    """A past run with its plan overlaid: each step's planned curve drawn from the moment
    the step really began, so a long wait early does not shift every later comparison."""
    spec = live_chart(plan, samples, None, started, ended, units, show_plan_ahead=False,
                      cursor=cursor)
    plan_t, plan_c = planned_as_run(plan, step_starts, started)
    traces = list(spec.traces)
    if plan_t.size:
        traces.append(Trace("plan", plan_t, plan_c, dashed=True, max_gap_s=math.inf))
    t_start, t_end = window or (started, max(ended, started + 60.0))
    return ChartSpec(t_start, t_end, spec.y_low, spec.y_high, traces, now=None, cursor=cursor,
                     t_origin=started, y_scale=spec.y_scale, y_offset=spec.y_offset)


def planned_as_run(plan: Plan, step_starts: Mapping[int, float], started: float
                   ) -> tuple[np.ndarray, np.ndarray]:
    """The planned setpoint, each step re-anchored at its real start (°C)."""
    times: list[float] = []
    values: list[float] = []
    for step in plan.steps:
        begin = step_starts.get(step.index)
        if begin is None:
            continue
        times += [begin, begin + step.duration_s]
        values += [step.from_c, step.to_c]
    if not times:
        return plan.times_s + started, plan.setpoints_c
    order = np.argsort(np.array(times), kind="stable")
    return np.array(times)[order], np.array(values)[order]


def preview_chart(plan: Plan, units: Units) -> ChartSpec:
    """A profile's planned curve alone, from zero to its planned end."""
    total = max(plan.total_s, 60.0)
    y_low, y_high = extents([plan.setpoints_c], units)
    trace = Trace("plan", plan.times_s, plan.setpoints_c, max_gap_s=math.inf)
    scale, offset = scale_for(units)
    return ChartSpec(0.0, total, y_low, y_high, [trace], t_origin=0.0, y_scale=scale,
                     y_offset=offset)
