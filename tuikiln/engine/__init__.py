"""The run engine: pure rules (stepper, alarms) and the async loop that applies them.

    stepper.py   which step, which setpoint, in which state (pure: `now` passed in)
    alarms.py    alarm conditions, raise/acknowledge/clear (pure)
    rules.py     RunRules = stepper + alarms + operator commands; replay reuses it
    status.py    the status object (`tuikiln status --json`, MQTT state, live screen)
    runner.py    the async loop: device -> rules -> device, log and sinks (RunEngine,
                 told by RunSettings)
    setpoint.py  keeping the controller on the run's setpoint: writes, re-arming
    saferetry.py after a run that could not reach the controller: trying the safe state
    safety.py    driving a device to the safe state; the watchdog's separate path
                 (SafetyWiring: its limit, a second connection)
    host.py      one engine wired from a kiln file: settings, log, alerts, safety
"""

from __future__ import annotations
