"""Reading the user's TOML files: the text, its parse, and where each key sits.

`LineMap` (key path -> line, because `tomllib` keeps no positions) is the drivers' one, so
register maps and the kiln file agree; here are the parts that speak in `Problem`s.
"""

from __future__ import annotations

import re
import tomllib

from tuikiln.drivers.tomllines import KeyPath, LineMap
from tuikiln.errors import Problem

__all__ = ["KeyPath", "LineMap", "load_toml", "read_text"]


def load_toml(text: str, file: str) -> tuple[dict | None, list[Problem]]:
    """Parse TOML; a syntax error becomes one Problem with its line, in plain words."""
    try:
        return tomllib.loads(text), []
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        match = re.search(r"\(at line (\d+), column (\d+)\)", message)
        line = int(match.group(1)) if match else None
        reason = re.sub(r"\s*\(at line \d+, column \d+\)", "", message)
        reason = reason[:1].lower() + reason[1:]
        col = f" (column {match.group(2)})" if match else ""
        return None, [Problem(file, line, f"this is not valid TOML{col}: {reason}")]
    except RecursionError:
        # tomllib recurses once per nested array or inline table
        return None, [Problem(file, None, "this is not a file tuikiln can read: arrays or "
                              "tables are nested far too deeply")]
    except ValueError as exc:
        # e.g. an integer of more than 4300 digits (Python's int conversion limit)
        return None, [Problem(file, None, f"this is not valid TOML: {exc}")]


def read_text(path: str) -> tuple[str | None, list[Problem]]:
    """Read a user's file; a missing or unreadable file is a Problem, not a traceback."""
    try:
        with open(path, encoding="utf-8") as handle:
            return handle.read(), []
    except FileNotFoundError:
        return None, [Problem(path, None, "no such file")]
    except IsADirectoryError:
        return None, [Problem(path, None, "this is a folder, not a file")]
    except PermissionError:
        return None, [Problem(path, None, "permission denied: tuikiln cannot read this file")]
    except UnicodeDecodeError as exc:
        return None, [Problem(path, None, f"this is not a UTF-8 text file ({exc.reason})")]
    except OSError as exc:
        return None, [Problem(path, None, f"cannot read this file: {exc.strerror or exc}")]
