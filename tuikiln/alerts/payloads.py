"""What the MQTT payloads carry beyond the engine's own dicts: ISO 8601 times beside the
epoch seconds, and state values short enough for a dashboard.

- Every epoch time (`time`, `started`) gets a twin `<key>_iso`: UTC in ISO 8601 extended
  format with an explicit offset ("2026-12-03T06:50:00.250+00:00"), which a person can read
  and any date library parses. The epoch number stays as it was: programs read it.
- The `state` topic's text values are cut to STATE_TEXT_MAX characters (ending in "…"); the
  whole texts go to the `attributes` topic, which the dashboard entities name as their
  attributes, so nothing is lost.
"""

from __future__ import annotations

from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

# The common home-automation dashboards refuse an entity state longer than 255 characters
# (Home Assistant's documented limit for a state; value from memory of its MQTT sensor docs).
STATE_TEXT_MAX = 255
EPOCH_KEYS = ("time", "started")
ELLIPSIS = "…"


def iso_utc(epoch_s: float) -> str:
    """Epoch seconds as ISO 8601 UTC, to the millisecond."""
    return datetime.fromtimestamp(epoch_s, tz=UTC).isoformat(timespec="milliseconds")


def with_iso_times(record: Mapping[str, Any]) -> dict[str, Any]:
    """The record with `<key>_iso` beside each epoch time it has (None stays None)."""
    out = dict(record)
    for key in EPOCH_KEYS:
        value = record.get(key)
        if isinstance(value, int | float) and not isinstance(value, bool):
            try:
                out[f"{key}_iso"] = iso_utc(float(value))
            except (OverflowError, OSError, ValueError):  # NaN or out of the calendar
                out[f"{key}_iso"] = None
    return out


def cut(text: str, limit: int = STATE_TEXT_MAX) -> str:
    return text if len(text) <= limit else text[: limit - len(ELLIPSIS)] + ELLIPSIS


def state_and_attributes(state: Mapping[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    """(the state payload, the attributes payload) for one engine status dict.

    The state keeps every key; its text values are at most STATE_TEXT_MAX characters. The
    attributes hold the whole texts a person reads (every text value, the alarms, the
    equalization words), with the same times."""
    timed = with_iso_times(state)
    short = {key: cut(value) if isinstance(value, str) else value
             for key, value in timed.items()}
    attributes: dict[str, Any] = {k: v for k, v in timed.items() if isinstance(v, str)}
    attributes["alarms"] = state.get("alarms") or []
    equalization = state.get("equalization")
    if isinstance(equalization, Mapping) and equalization.get("words"):
        attributes["equalization_words"] = equalization["words"]
    safe = state.get("safe_state")
    if isinstance(safe, Mapping) and safe.get("words"):
        attributes["safe_state_words"] = safe["words"]
    return short, attributes
