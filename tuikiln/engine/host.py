"""One way to host a run engine: the background run (`tuikiln run`) and the in-process demo
wire the engine, its run log, its alerts, its safety paths and its time forecast here, the
same way.

    settings = settings_for(kiln, profile, speed="60")
    engine = host_engine(kiln, profile, device, data_dir, settings, terminal=sys.stdout)

The alerts get the engine through a box filled once the engine exists (the fan-out is made
first because the engine takes its sinks when built): events the alerts make themselves go
to `RunEngine.post_event`, remote commands to `RunEngine.command` (which refuses what adds
heat).
"""

from __future__ import annotations

from pathlib import Path
from typing import TextIO

from tuikiln.drivers.base import Device
from tuikiln.drivers.factory import open_device
from tuikiln.engine.recovery import ResumePlan
from tuikiln.engine.runner import KilnInfo, RunEngine, RunSettings
from tuikiln.engine.safety import DEFAULT_SAFETY, SafetyWiring
from tuikiln.kiln import Kiln
from tuikiln.limits import Limits
from tuikiln.profile import Profile
from tuikiln.runlog import RunLog


def settings_for(kiln: Kiln, profile: Profile, *, tick_s: float = 1.0, start_index: int = 0,
                 speed: str = "", auto_continue: bool = False) -> RunSettings:
    """The engine's settings for `profile` on `kiln`: the kiln's name, units, maximum and
    text, and the alarm limits (the kiln's `[alarms]` over the defaults, the profile's
    `[limits]` over both)."""
    return RunSettings(KilnInfo(kiln.name, kiln.units, kiln.max_c, kiln.text),
                       Limits().merged(kiln.alarms).merged(profile.limits), tick_s=tick_s,
                       start_index=start_index, speed=speed, auto_continue=auto_continue)


def safety_for(kiln: Kiln) -> SafetyWiring:
    """The watchdog, and for a real controller a second connection to stop the heat when
    the first hangs (the built-in simulator lives in the engine's own process: no second
    path to it)."""
    if kiln.is_simulator:
        return DEFAULT_SAFETY

    def second_connection() -> Device:
        return open_device(kiln.device, kiln.base_dir)

    return SafetyWiring(second_connection=second_connection)


def host_engine(kiln: Kiln, profile: Profile, device: Device, data_dir: Path,
                settings: RunSettings, *, terminal: TextIO | None, alerts: bool = True,
                resume: ResumePlan | None = None) -> RunEngine:
    """A run engine for `profile` on `device`, logging into `data_dir`; with `alerts`, the
    kiln file's terminal lines (when `terminal` is given), MQTT, hooks and channels are
    wired. `resume` carries on an unfinished run (tuikiln.engine.recovery)."""
    from tuikiln.alerts import alerts_for_engine
    from tuikiln.ovenmodel_store import live_forecast

    box: list[RunEngine] = []
    wanted = alerts and (terminal is not None or kiln.mqtt is not None or bool(kiln.hooks)
                         or bool(kiln.channels))
    sinks = [alerts_for_engine(kiln, box, terminal=terminal, clock=device.clock.now)
             ] if wanted else []
    engine = RunEngine(device, profile, settings, runlog=RunLog.in_folder(data_dir),
                       sinks=sinks, resume=resume, safety=safety_for(kiln))
    engine.forecast = live_forecast(data_dir, kiln.name, profile, settings.limits)
    box.append(engine)
    return engine
