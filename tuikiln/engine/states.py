"""Names of step states and run states: stable codes stored in run logs and sent over MQTT.

A sample stores its step state as the index into STEP_STATES (a small integer), so these
codes may be appended to but never reordered.
"""

from __future__ import annotations

# Step states (our own names). Index = code stored in the run log's samples.
STARTING = "starting"        # before the first tick
HEATING = "heating"          # setpoint climbing at the ramp's rate
HEATING_FULL = "heating-full"  # a `max` ramp: target set at once, heating as fast as it goes
REACHING = "reaching"        # setpoint at target, waiting for the temperature to enter the band
EVENING = "evening"          # in band, waiting for the load to even out (equalized hold)
HOLDING = "holding"          # hold clock running
SLIPPED = "slipped"          # out of band during a hold: the hold clock is stopped
COOLING = "cooling"          # setpoint falling at the cool's rate
SETTLING = "settling"        # setpoint at a cool's target, waiting for the temperature
COASTING = "coasting"        # free cool: heater off until at or below the target
WAITING_YOU = "waiting-you"  # a pause step: waiting for the person to acknowledge
DONE = "done"                # every step finished
WATCHING = "watching"        # reserved: a watch-only run between steps

STEP_STATES: tuple[str, ...] = (
    STARTING, HEATING, HEATING_FULL, REACHING, EVENING, HOLDING, SLIPPED, COOLING,
    SETTLING, COASTING, WAITING_YOU, DONE, WATCHING,
)
STATE_CODE: dict[str, int] = {name: i for i, name in enumerate(STEP_STATES)}

# Run states (the status object's "state").
RUN_STARTING = "starting"
RUN_RUNNING = "running"
RUN_PAUSED = "paused"            # the person paused the run: setpoint held, clocks stopped
RUN_WAITING = "waiting-for-you"  # a pause step, or a critical alarm waiting to be seen
RUN_ENDED = "ended"

# Outcomes (runs.outcome in the log, RUN_END detail).
COMPLETED = "completed"
ABORTED = "aborted"
STOPPED_BY_ALARM = "stopped-by-alarm"
STOPPED_BY_SIGNAL = "stopped-by-signal"
ENGINE_FAILED = "engine-failed"
UNFINISHED = "unfinished"        # no end was written (the process was killed)

# Sample flags (bit field).
FLAG_NO_READING = 1
FLAG_SENSOR_FAULT = 2
FLAG_PAUSED = 4
FLAG_WATCH_ONLY = 8
FLAG_ALARM = 16
FLAG_CORE_ESTIMATED = 32
FLAG_HEAT_OFF = 64
