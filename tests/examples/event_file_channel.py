"""A toy alert channel, written by following docs/CONTRIBUTING.md "An alert channel".

In the project it would be tuikiln/alerts/channels/event_file.py; here it lives with the
tests so it does not ship. It appends each event of a run to a file, one JSON object a line:

    [event_file]
    path = "events.jsonl"     # relative to the kiln file's folder
    alarms_only = false       # true (default): only alarms and calls for the operator
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping
from typing import Any

from tuikiln.alerts.channels import Channel, ChannelContext, register_channel
from tuikiln.alerts.fanout import EventsOnlySink
from tuikiln.alerts.settings import HOOK_GROUPS
from tuikiln.drivers.checking import Setting
from tuikiln.events import Event

TELLS = HOOK_GROUPS["alarm"] | HOOK_GROUPS["operator"]


class EventFile(EventsOnlySink):
    """An AlertSink: returns at once (a line appended to a local file is quick)."""

    def __init__(self, path: str, alarms_only: bool) -> None:
        self.path = path
        self.alarms_only = alarms_only

    def event(self, event: Event) -> None:
        if self.alarms_only and event.kind not in TELLS:
            return
        line = {"time": event.time, "kind": event.kind, "message": event.message}
        with open(self.path, "a", encoding="utf-8") as handle:
            handle.write(json.dumps(line) + "\n")


def _where(path: str, base_dir: str) -> str:
    return os.path.join(base_dir, os.path.expanduser(path))


def _check(values: Mapping[str, Any], base_dir: str) -> list[tuple[str, str]]:
    folder = os.path.dirname(_where(values["path"], base_dir)) or "."
    if not os.path.isdir(folder):
        return [("path", f'"path": no such folder: {folder}')]
    return []


def _build(values: Mapping[str, Any], context: ChannelContext) -> EventFile:
    return EventFile(_where(values["path"], context.base_dir), values["alarms_only"])


CHANNEL = register_channel(Channel(
    table="event_file",
    settings=(
        Setting("path", "text", strip=True, example='"events.jsonl"',
                missing='say where: path = "events.jsonl"'),
        Setting("alarms_only", "flag", True),
    ),
    build=_build,
    check=_check,
))
