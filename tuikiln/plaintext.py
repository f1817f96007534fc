"""Text from outside (notes, reasons, names) made safe to store, send and show.

Text reaches the engine from MQTT, the control socket and the command line, where a lone
surrogate (an escaped "\\ud800" in JSON, or invalid bytes in an argument) cannot be encoded
as UTF-8 and would fail the log's commit, and where escape codes would drive the terminal
that prints them. Everything that crosses a boundary goes through `plain` once.
"""

from __future__ import annotations

import re
from typing import Any

REPLACEMENT = "\ufffd"
_SURROGATE = re.compile("[\ud800-\udfff]")
# C0 and C1 controls, DEL, the line/paragraph separators and the bidirectional overrides
# (they reorder what is shown, so a note could read differently from what it says).
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
_CONTROL_KEEP_LINES = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e"
                                 "\u2066-\u2069]")


def plain(text: Any, *, lines: bool = False, limit: int | None = None) -> str:
    """`text` as printable, encodable text: surrogates become U+FFFD, control characters
    (escape codes included) become spaces; newlines survive only when `lines`."""
    value = text if isinstance(text, str) else str(text)
    value = _SURROGATE.sub(REPLACEMENT, value)
    value = (_CONTROL_KEEP_LINES if lines else _CONTROL).sub(" ", value)
    if limit is not None and len(value) > limit:
        value = value[: max(0, limit - 1)] + "…"
    return value


def plain_tree(value: Any) -> Any:
    """`plain` applied to every string inside a JSON-like value (keys too)."""
    if isinstance(value, str):
        return plain(value, lines=True)
    if isinstance(value, dict):
        return {plain(k) if isinstance(k, str) else k: plain_tree(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain_tree(v) for v in value]
    return value
