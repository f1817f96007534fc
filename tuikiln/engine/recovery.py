"""Restart recovery: carrying on a run whose engine died (kill -9, power cut, reboot).

    unfinished = find_unfinished(runlog, kiln.name)        # latest run with no end, dead pid
    plan = plan_resume(runlog, unfinished, kiln.on_restart, now=time.time())
    engine = RunEngine(device, profile, settings, resume=plan)   # appends to the same run

What the engine stores so it can be carried on: with every commit of the run log, the
stepper's *resume point* (`snapshot`): step index, step state, hold clock, time out of
band, targets. It is written in the same transaction as the samples, so the point and the
last committed sample always agree.

The kiln file's `on_restart` says what happens when the engine comes back:

- "continue": carry on at the logged step. A hold keeps its logged hold clock: the time the
  engine was away is never credited to it (no readings prove the oven stayed in the band);
  if the temperature is out of the band on return the hold is "slipped" since the moment
  the engine went away, so the missed-hold rules (hold-slipped alarm after `hold_grace`,
  time out of band in the step's record) apply. A ramp or cool starts again from the
  temperature the oven is at now; a hold still waiting to reach (or to even out) waits
  again; a pause step asks the person again.
- "hold" (the default): *hold safe* and wait for a person. The device is driven to the
  safe state (heat off, setpoint down) at once, the run stays paused with its clocks
  stopped, and the person is asked to `tuikiln resume` (or `tuikiln ack`) to carry on as
  "continue" would from the temperature the oven has then, or `tuikiln abort` to end it.
  Keeping the last setpoint instead would leave an unattended oven at up to its maximum
  after a crash nobody has looked at; heat off is the state that cannot hurt.
- "end": drive safe and end the run, outcome "ended-after-restart".

A run whose end is in its end mark (tuikiln/runlog.py, EndMark: the engine ended it, an
abort say, but a full disk kept the end out of the database) is over whatever `on_restart`
says: the restarted engine drives the device safe and logs that end; it never heats.

Two guards over the policy: a "continue" after more than CONTINUE_WITHIN_S away becomes
"hold" (after half a day the load may have been taken out, the oven may be cold: a person
decides), and any run away longer than END_AFTER_S is ended (nobody resumes last week's
run).

The stepper (tuikiln/engine/stepper.py) has no restore method of its own; `restore_stepper`
sets its public bookkeeping (index, state, clocks, targets) and nothing private, so the
stepper's own rules take over from the next tick. A ramp, cool or pause step is restored
as "starting" at its index, so the stepper enters it afresh from the temperature now.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from tuikiln.engine import states as st
from tuikiln.engine.states import RestartPolicy
from tuikiln.engine.stepper import within_band
from tuikiln.profile import Hold, Pause
from tuikiln.runlog import RunInfo, RunLog

CONTINUE_WITHIN_S = 12 * 3600.0
END_AFTER_S = 7 * 86400.0


@dataclass(frozen=True)
class ResumePlan:
    """What a restarted engine needs: which run, where it was, and what to do now."""

    run: RunInfo
    policy: RestartPolicy
    """The policy that applies, after the guards."""
    asked: str
    """The kiln file's `on_restart`."""
    point: dict[str, Any] | None
    """The last committed resume point (see `snapshot`); None when none was committed."""
    last: dict[str, Any] | None
    """The last committed sample (t, chamber_c, ...); None when none was committed."""
    away_s: float
    why: str = ""
    """Why the policy differs from the one asked, in plain words ("" when it does not)."""
    end_outcome: str | None = None
    """The outcome to log when the policy is "end" (None: Outcome.ENDED_AFTER_RESTART)."""

    @property
    def away_since(self) -> float:
        if self.last is not None:
            return float(self.last["t"])
        if self.point is not None:
            return float(self.point["t"])
        return float(self.run.started)

    @property
    def before_c(self) -> float | None:
        if self.last is None:
            return None
        value = self.last.get("chamber_c")
        return None if value is None else float(value)


def snapshot(stepper: Any) -> dict[str, Any]:
    """The stepper's resume point (plain JSON values)."""
    return {
        "index": stepper.index,
        "state": stepper.state,
        "hold_clock_s": stepper.hold_clock_s,
        "out_of_band_s": stepper.out_of_band_s,
        "active_s": stepper.active_s,
        "target_c": stepper.target_c,
        "setpoint_c": stepper.setpoint_c,
        "step_started_at": stepper.step_started_at,
        "reached_at": stepper.reached_at,
        "paused": stepper.paused,
        "acknowledged": stepper.acknowledged,
        "ended": stepper.ended,
    }


def find_unfinished(runlog: RunLog, kiln_name: str) -> RunInfo | None:
    """The kiln's latest run, if it has no end and its engine is dead; else None.

    Only the latest run counts: an older unfinished run was superseded by a newer one."""
    runs = [r for r in runlog.runs() if r.kiln == kiln_name]
    if not runs:
        return None
    latest = runs[-1]
    return latest if latest.status == st.Outcome.UNFINISHED else None


def plan_resume(runlog: RunLog, run: RunInfo, asked: str, *, now: float) -> ResumePlan:
    point = runlog.resume_point(run.id)
    last = runlog.last_sample(run.id)
    since = (float(last["t"]) if last is not None else
             float(point["t"]) if point is not None else float(run.started))
    away = max(0.0, now - since)
    policy = RestartPolicy(asked) if asked in tuple(RestartPolicy) else RestartPolicy.HOLD
    why = ""
    mark = runlog.end_mark(run.id)
    if mark is not None:
        outcome = mark["outcome"]
        return ResumePlan(run, RestartPolicy.END, asked, point, last, away,
                          f"the run had already ended ({outcome.replace('-', ' ')}) before "
                          "the restart; the run log could not take it then", outcome)
    if away > END_AFTER_S:
        policy = RestartPolicy.END
        why = f"the engine was away more than {END_AFTER_S / 86400:.0f} days"
    elif policy == RestartPolicy.CONTINUE and away > CONTINUE_WITHIN_S:
        policy = RestartPolicy.HOLD
        why = (f"the engine was away more than {CONTINUE_WITHIN_S / 3600:.0f} h"
               ": a person decides whether to carry on")
    elif policy == RestartPolicy.CONTINUE and point is not None and point.get("paused"):
        policy, why = RestartPolicy.HOLD, "the run was paused when the engine went away"
    elif policy == RestartPolicy.CONTINUE and point is not None and point.get("held_for_restart"):
        policy = RestartPolicy.HOLD
        why = "the run was holding safe for a person after an earlier restart"
    return ResumePlan(run, policy, asked, point, last, away, why)


def resume_index(plan: ResumePlan, steps: int) -> int:
    """The step to carry on with."""
    point = plan.point
    if point is not None:
        index = int(point["index"])
        if point.get("acknowledged"):
            index += 1  # the person had answered the pause: it is done
    elif plan.last is not None and plan.last.get("step") is not None:
        index = int(plan.last["step"])
    else:
        index = 0
    return max(0, min(index, steps))


def restore_stepper(stepper: Any, plan: ResumePlan, now: float, temp_c: float | None) -> str:
    """Put the stepper where the run was; returns what happens next, in plain words.

    Sets only the stepper's public bookkeeping (see the module docstring)."""
    steps = stepper.steps
    index = resume_index(plan, len(steps))
    point = plan.point or {}
    stepper.index = index
    stepper.paused = False
    stepper.paused_since = None
    stepper.last_now = now
    stepper.acknowledged = False
    if index >= len(steps):
        stepper.state = st.STARTING  # the next tick finds no step and ends the run
        return "every step was done"
    step = steps[index]
    target = point.get("target_c")
    if target is None and plan.last is not None:
        target = plan.last.get("setpoint_c")
    stepper.target_c = None if target is None else float(target)
    same_step = point.get("index") == index
    if isinstance(step, Hold) and same_step and stepper.target_c is not None:
        logged = str(point.get("state", st.REACHING))
        stepper.setpoint_c = stepper.target_c
        stepper.heat_off = False
        stepper.hold_clock_s = float(point.get("hold_clock_s") or 0.0)
        stepper.out_of_band_s = float(point.get("out_of_band_s") or 0.0)
        stepper.active_s = float(point.get("active_s") or 0.0)
        started = point.get("step_started_at")
        stepper.step_started_at = now if started is None else float(started)
        stepper.detector = None
        stepper.equalize = None
        band = stepper.band_c(step)
        in_band = temp_c is not None and within_band(temp_c, stepper.target_c, band)
        if logged in (st.HOLDING, st.SLIPPED):
            if in_band:
                stepper.state, stepper.state_since = st.HOLDING, now
            else:
                # Out of band since the engine went away: the missed-hold rules apply.
                stepper.out_of_band_s += plan.away_s
                stepper.state, stepper.state_since = st.SLIPPED, plan.away_since
            left = max(0.0, step.duration_s - stepper.hold_clock_s)
            return (f"carrying on with the hold of step {index + 1}: "
                    f"{_minutes(left)} of its clock left")
        # Still reaching or evening out: wait for the band (and the load) again.
        stepper.reached_at = None
        stepper.state, stepper.state_since = st.REACHING, now
        return f"carrying on with step {index + 1}: waiting for the band again"
    # A ramp, cool or pause (or a hold with nothing logged): enter it afresh from now.
    stepper.setpoint_c = (stepper.target_c if isinstance(step, Pause) else None)
    stepper.heat_off = False
    stepper.state = st.STARTING
    return f"carrying on with step {index + 1} from the temperature now"


def hold_safe(stepper: Any, now: float) -> None:
    """The stepper's side of "hold safe": paused (clocks stopped), setpoint down, no heat."""
    from tuikiln.engine.stepper import FREE_COOL_SETPOINT_C

    stepper.paused = True
    stepper.paused_since = now
    stepper.setpoint_c = FREE_COOL_SETPOINT_C
    stepper.heat_off = True


def _minutes(seconds: float) -> str:
    if seconds < 90:
        return f"{max(0, round(seconds))} s"
    return f"{round(seconds / 60)} min"
