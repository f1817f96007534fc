"""The run engine: pure rules (stepper, alarms) and the async loop that applies them.

    stepper.py   which step, which setpoint, in which state (pure: `now` passed in)
    alarms.py    alarm conditions, raise/acknowledge/clear (pure)
    rules.py     RunRules = stepper + alarms + operator commands; replay reuses it
    status.py    the status object (`tuikiln status --json`, MQTT state, live screen)
    runner.py    the async loop: device -> rules -> device, log and sinks
    safety.py    driving a device to the safe state, signals
"""

from __future__ import annotations
