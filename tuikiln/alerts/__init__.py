"""Alerts: everything that tells the world what a run is doing.

    AlertFanout (fanout.py)   the one AlertSink the engine talks to
      TerminalSink            a line per event, a bell on alarms (headless runs)
      MqttPublisher (mqtt.py) status, state, events, readings; remote commands (remote.py);
                              dashboard discovery (discovery.py)
      HookRunner (hooks.py)   programs run for chosen events

The kiln file's `[mqtt]` and `[[hook]]` are checked by settings.py. `build_alerts` wires it
all for the engine, which passes its emit (events the alerts raise themselves: refusals,
failures) and its command handler.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence
from typing import Any, TextIO

from tuikiln.alerts.channels import ChannelContext, build_channels
from tuikiln.alerts.fanout import AlertFanout, TerminalSink
from tuikiln.alerts.hooks import HookRunner
from tuikiln.alerts.mqtt import CommandCallback, MqttPublisher
from tuikiln.alerts.settings import HookSpec, MqttSettings, check_hooks, check_mqtt_settings
from tuikiln.events import AlertSink, Event

__all__ = [
    "AlertFanout", "HookRunner", "HookSpec", "MqttPublisher", "MqttSettings", "TerminalSink",
    "build_alerts", "check_hooks", "check_mqtt_settings",
]


def build_alerts(
    *,
    kiln_name: str,
    emit: Callable[[Event], None],
    on_command: CommandCallback | None = None,
    mqtt: MqttSettings | None = None,
    hooks: Sequence[HookSpec] = (),
    units: str = "C",
    terminal: TextIO | None = None,
    bell: bool = False,
    clock: Callable[[], float] = time.time,
    channels: Mapping[str, Mapping[str, Any]] | None = None,
    base_dir: str = ".",
) -> AlertFanout:
    """The fan-out for one engine: terminal (when a stream is given), MQTT, hooks, and the
    registered channels (tuikiln.alerts.channels) the kiln file configures."""
    sinks: list[AlertSink] = []
    if terminal is not None:
        sinks.append(TerminalSink(terminal, bell=bell))
    if mqtt is not None:
        sinks.append(MqttPublisher(mqtt, emit=emit, on_command=on_command, clock=clock))
    if hooks:
        secret = (mqtt.password_env,) if mqtt is not None else ()
        sinks.append(HookRunner(hooks, kiln_name=kiln_name, emit=emit, units=units, clock=clock,
                                secret_env=secret))
    if channels:
        context = ChannelContext(kiln_name=kiln_name, units=units, base_dir=base_dir, emit=emit,
                                 clock=clock)
        sinks += build_channels(channels, context)
    return AlertFanout(sinks)


def alerts_for_engine(kiln: Any, engine_box: list[Any], *, terminal: TextIO | None,
                      clock: Callable[[], float]) -> AlertFanout:
    """The fan-out wired to a run engine that will sit in `engine_box[0]`: events the
    alerts make themselves (a failed hook, a refused remote command) go to the engine's log,
    and remote commands go to the engine's command path (which refuses what adds heat)."""

    def emit(event: Event) -> None:
        if engine_box:
            engine_box[0].post_event(event)

    def on_command(name: str, args: dict, source: str) -> None:
        if engine_box:
            arg = args.get("alarm") or args.get("text") or args.get("reason")
            engine_box[0].command(name, arg, source)

    return build_alerts(kiln_name=kiln.name, emit=emit, on_command=on_command,
                        mqtt=kiln.mqtt, hooks=kiln.hooks, units=kiln.units, terminal=terminal,
                        bell=bool(getattr(kiln, "bell", False)), clock=clock,
                        channels=getattr(kiln, "channels", None),
                        base_dir=getattr(kiln, "base_dir", "."))
