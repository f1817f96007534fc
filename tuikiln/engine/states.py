"""The engine-UI contract's names: step states, run states, outcomes, restart policies and the
event kinds that ring a bell, each a StrEnum in this one module.

These strings are a public interface (the run log, MQTT, `--json`, the control socket): a
StrEnum member *is* its string (equal, same hash, same JSON), so code compares and stores
members and every reader keeps seeing the same text. Never spell one of these strings by hand
elsewhere: "waiting-you" (a step state) and "waiting-for-you" (a run state) are easy to mix up.

A sample stores its step state as the index into STEP_STATES (a small integer), so step
states may be appended to but never reordered.
"""

from __future__ import annotations

from enum import StrEnum

from tuikiln import events as ev


class StepState(StrEnum):
    """Where the current step is (the status's `step_state`; stored as its index)."""

    STARTING = "starting"          # before the first tick
    HEATING = "heating"            # setpoint climbing at the ramp's rate
    HEATING_FULL = "heating-full"  # a `max` ramp: target set at once, heating as fast as it goes
    REACHING = "reaching"          # setpoint at target, waiting for the temperature in band
    EVENING = "evening"            # in band, waiting for the load to even out (equalized hold)
    HOLDING = "holding"            # hold clock running
    SLIPPED = "slipped"            # out of band during a hold: the hold clock is stopped
    COOLING = "cooling"            # setpoint falling at the cool's rate
    SETTLING = "settling"          # setpoint at a cool's target, waiting for the temperature
    COASTING = "coasting"          # free cool: heater off until at or below the target
    WAITING_YOU = "waiting-you"    # a pause step: waiting for the person to acknowledge
    DONE = "done"                  # every step finished
    WATCHING = "watching"          # reserved: a watch-only run between steps


class RunState(StrEnum):
    """The run as a whole (the status's `state`)."""

    STARTING = "starting"
    RUNNING = "running"
    PAUSED = "paused"              # the person paused the run: setpoint held, clocks stopped
    WAITING = "waiting-for-you"    # a pause step, or a critical alarm waiting to be seen
    ENDED = "ended"


class Outcome(StrEnum):
    """How a run ended (runs.outcome in the log, the run-end event's detail)."""

    COMPLETED = "completed"
    ABORTED = "aborted"
    STOPPED_BY_ALARM = "stopped-by-alarm"
    STOPPED_BY_SIGNAL = "stopped-by-signal"
    ENGINE_FAILED = "engine-failed"
    ENDED_AFTER_RESTART = "ended-after-restart"  # on_restart = "end" (engine/recovery.py)
    UNFINISHED = "unfinished"      # no end was written (the process was killed)


class RestartPolicy(StrEnum):
    """The kiln file's `on_restart`: what a restarted engine does with an unfinished run."""

    CONTINUE = "continue"          # carry on at the logged step
    HOLD = "hold"                  # heat off, clocks stopped, wait for a person
    END = "end"                    # drive safe and end the run (ENDED_AFTER_RESTART)


class BellKind(StrEnum):
    """Event kinds that ring the terminal bell (when the bell is on)."""

    ALARM_RAISED = ev.ALARM_RAISED
    OPERATOR_NEEDED = ev.OPERATOR_NEEDED
    SAFE_STATE = ev.SAFE_STATE


# Every bell rings for an alarm and for a person needed. A headless run's terminal rings for
# the safe state too: it also comes at every end, which nobody sees there; the live screen
# shows the end itself (and would ring right after the person's own abort).
SCREEN_BELL: frozenset[BellKind] = frozenset({BellKind.ALARM_RAISED, BellKind.OPERATOR_NEEDED})
TERMINAL_BELL: frozenset[BellKind] = frozenset(BellKind)

STEP_STATES: tuple[StepState, ...] = tuple(StepState)  # definition order = the stored code
STATE_CODE: dict[str, int] = {state: i for i, state in enumerate(STEP_STATES)}

# Short names the engine's code uses (members, not copies of the strings).
STARTING = StepState.STARTING
HEATING = StepState.HEATING
HEATING_FULL = StepState.HEATING_FULL
REACHING = StepState.REACHING
EVENING = StepState.EVENING
HOLDING = StepState.HOLDING
SLIPPED = StepState.SLIPPED
COOLING = StepState.COOLING
SETTLING = StepState.SETTLING
COASTING = StepState.COASTING
WAITING_YOU = StepState.WAITING_YOU
DONE = StepState.DONE
WATCHING = StepState.WATCHING

RUN_STARTING = RunState.STARTING
RUN_RUNNING = RunState.RUNNING
RUN_PAUSED = RunState.PAUSED
RUN_WAITING = RunState.WAITING
RUN_ENDED = RunState.ENDED

COMPLETED = Outcome.COMPLETED
ABORTED = Outcome.ABORTED
STOPPED_BY_ALARM = Outcome.STOPPED_BY_ALARM
STOPPED_BY_SIGNAL = Outcome.STOPPED_BY_SIGNAL
ENGINE_FAILED = Outcome.ENGINE_FAILED
ENDED_AFTER_RESTART = Outcome.ENDED_AFTER_RESTART
UNFINISHED = Outcome.UNFINISHED

# Sample flags (bit field).
FLAG_NO_READING = 1
FLAG_SENSOR_FAULT = 2
FLAG_PAUSED = 4
FLAG_WATCH_ONLY = 8
FLAG_ALARM = 16
FLAG_CORE_ESTIMATED = 32
FLAG_HEAT_OFF = 64
