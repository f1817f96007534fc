"""One way to host a run engine: the background run (`tuikiln run`) and the in-process demo
wire the engine, its run log, its alerts and its time forecast here, the same way.

The alerts get the engine through a box filled once the engine exists (the fan-out is made
first because the engine takes its sinks when built): events the alerts make themselves go
to `RunEngine.post_event`, remote commands to `RunEngine.command` (which refuses what adds
heat).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, TextIO

from tuikiln.engine.runner import KilnInfo, RunEngine
from tuikiln.limits import Limits
from tuikiln.profile import Profile
from tuikiln.runlog import RunLog


def host_engine(kiln: Any, profile: Profile, device: Any, data_dir: Path, *, limits: Limits,
                terminal: TextIO | None, alerts: bool = True, **options: Any) -> RunEngine:
    """A run engine for `profile` on `device`, logging into `data_dir`; with `alerts`, the
    kiln file's terminal lines (when `terminal` is given), MQTT, hooks and channels are
    wired. `options` go to RunEngine as they are (speed, tick_s, resume, ...)."""
    from tuikiln.alerts import alerts_for_engine
    from tuikiln.ovenmodel_store import live_forecast

    box: list[RunEngine] = []
    wanted = alerts and (terminal is not None or kiln.mqtt is not None or bool(kiln.hooks)
                         or bool(getattr(kiln, "channels", None)))
    sinks = [alerts_for_engine(kiln, box, terminal=terminal, clock=device.clock.now)
             ] if wanted else []
    engine = RunEngine(device, profile, kiln=KilnInfo(kiln.name, kiln.units, kiln.max_c,
                                                        kiln.text),
                       limits=limits, runlog=RunLog.in_folder(data_dir), sinks=sinks,
                       **options)
    engine.forecast = live_forecast(data_dir, kiln.name, profile, limits)  # the model's ETA
    box.append(engine)
    return engine
