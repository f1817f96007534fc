"""Alert channels in modules of their own: the one place a channel is registered.

A channel is a table of the kiln file (`[NAME]`), its keys declared as `Setting`s (checked by
tuikiln.drivers.checking like every settings table, with file, line and "did you mean"), and
`build(values, context)` that makes the `AlertSink` (tuikiln.events) the fan-out feeds.
`register_channel(Channel(...))` in a module of this package is all: the package finds its
modules, the kiln file accepts and checks the table, the engine's fan-out gets the sink.
docs/CONTRIBUTING.md has the recipe. MQTT and the hooks predate this and keep their own
wiring (tuikiln/alerts/__init__.py).

A channel only tells: it never changes the run (commands from outside belong to the MQTT
channel, which refuses anything that adds heat).
"""

from __future__ import annotations

import importlib
import pkgutil
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from tuikiln.drivers.checking import Problems, Setting, check_table
from tuikiln.events import AlertSink, Event


@dataclass(frozen=True)
class ChannelContext:
    """What a channel may know of the run it tells about."""

    kiln_name: str
    units: str
    base_dir: str
    """The kiln file's folder: relative paths in the channel's table start here."""
    emit: Callable[[Event], None]
    """Log an event of the channel's own (e.g. that it failed) in the run's log."""
    clock: Callable[[], float]


@dataclass(frozen=True)
class Channel:
    table: str
    """The kiln file's table, `[table]`; also the channel's name."""
    settings: tuple[Setting, ...]
    build: Callable[[Mapping[str, Any], ChannelContext], AlertSink]
    check: Callable[[Mapping[str, Any], str], list[tuple[str, str]]] | None = None
    """What the table cannot say: (values, kiln folder) -> [(key, message)]."""


CHANNELS: dict[str, Channel] = {}


def register_channel(channel: Channel) -> Channel:
    known = CHANNELS.get(channel.table)
    if known is not None and known != channel:
        raise ValueError(f"an alert channel [{channel.table}] is registered already")
    CHANNELS[channel.table] = channel
    return channel


def forget_channel(table: str) -> None:
    """Unregister a channel (tests that register a toy one)."""
    CHANNELS.pop(table, None)


def check_channel(table: str, raw: Any, base_dir: str) -> tuple[dict[str, Any] | None, Problems]:
    """The values of the kiln file's `[table]` for its channel, or None and the problems."""
    channel = CHANNELS[table]
    if not isinstance(raw, Mapping):
        return None, [((table,), f'"{table}" must be a table: write [{table}] and its keys')]
    problems: Problems = []
    values = check_table(raw, channel.settings, (table,), problems)
    if not problems and channel.check is not None:
        problems += [((table, key), message) for key, message in channel.check(values, base_dir)]
    return (None if problems else values), problems


def build_channels(configured: Mapping[str, Mapping[str, Any]], context: ChannelContext
                   ) -> list[AlertSink]:
    return [CHANNELS[table].build(values, context) for table, values in configured.items()
            if table in CHANNELS]


def _find_shipped_channels() -> None:
    for module in pkgutil.iter_modules(__path__):
        importlib.import_module(f"{__name__}.{module.name}")


_find_shipped_channels()
