"""Remote commands over MQTT: what may come in, and what is refused.

A remote command may only make things safer or quieter. The allow-list lives here and
nowhere else. Payloads are JSON objects on `{prefix}/{id}/command`:

    {"command": "ack"}                          acknowledge the alarms (never a pause step
                                                or a hold after a restart: going on adds heat)
    {"command": "ack", "alarm": "CODE"}         acknowledge one alarm
    {"command": "pause"}                        pause the run (holds, never adds heat)
    {"command": "abort"}                        end the run and drive the oven safe
    {"command": "abort", "reason": "words"}
    {"command": "note", "text": "words"}        add a note to the run log

Anything that adds heat (resume, skip, start, setpoint, ...) is refused and so is anything
unknown, malformed, retained, or larger than MAX_PAYLOAD bytes; a refusal changes nothing and
becomes a COMMAND_REFUSED event.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any

MAX_PAYLOAD = 4096
MAX_TEXT = 1000

# name -> {field: required?}; the only commands accepted from the network.
ALLOWED_COMMANDS: dict[str, dict[str, bool]] = {
    "ack": {"alarm": False},
    "pause": {},
    "abort": {"reason": False},
    "note": {"text": True},
}
# Known commands that could add heat: only a person at the oven may give them.
HEAT_ADDING = ("resume", "continue", "skip", "start", "setpoint", "run", "next", "retry")


@dataclass(frozen=True)
class RemoteCommand:
    name: str
    args: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Refusal:
    name: str
    """The command's name if one could be read, else '?'."""
    reason: str


def parse_command(
    payload: bytes | bytearray | str | None, retained: bool = False
) -> RemoteCommand | Refusal:
    """Read one command message; a Refusal says in plain words why nothing will happen."""
    if retained:
        return Refusal("?", "retained commands are ignored: a command must be sent live, "
                       "not left on the broker to fire again at every reconnect")
    if payload is None:
        payload = b""
    raw = payload.encode("utf-8") if isinstance(payload, str) else bytes(payload)
    if len(raw) > MAX_PAYLOAD:
        return Refusal("?", f"the message is {len(raw)} bytes; at most {MAX_PAYLOAD} are accepted")
    try:
        data = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        # RecursionError: json recurses once per nested array or object ("[" * 4000)
        return Refusal("?", 'not a JSON object such as {"command": "abort"}')
    if not isinstance(data, dict):
        return Refusal("?", 'not a JSON object such as {"command": "abort"}')
    name = data.get("command")
    if not isinstance(name, str) or not name:
        return Refusal("?", 'the "command" field is missing or not text')
    name = name.strip().lower()[:40]
    if name in HEAT_ADDING:
        return Refusal(name, f'"{name}" could add heat: it is accepted only at the oven, '
                       "never remotely")
    if name not in ALLOWED_COMMANDS:
        allowed = ", ".join(ALLOWED_COMMANDS)
        return Refusal(name, f'unknown command "{name}"; remote commands are: {allowed}')
    fields = ALLOWED_COMMANDS[name]
    args: dict[str, Any] = {}
    for key, value in data.items():
        if key == "command":
            continue
        if key not in fields:
            return Refusal(name, f'"{name}" takes no field "{key}"')
        if not isinstance(value, str) or len(value) > MAX_TEXT:
            return Refusal(name, f'"{key}" must be text of at most {MAX_TEXT} characters')
        args[key] = value
    for key, required in fields.items():
        if required and not str(args.get(key, "")).strip():
            example = f'{{"command": "{name}", "{key}": "..."}}'
            return Refusal(name, f'"{name}" needs "{key}", e.g. {example}')
    return RemoteCommand(name, args)
