"""Where keys sit in a TOML file, because `tomllib` keeps no positions.

A light scan of table headers (`[a.b]`, `[[a]]`) and `key =` lines is enough for the files
tuikiln reads: it maps a key path such as ("step", 3, "hold") to its line number. Inline
tables (`x = { a = 1 }`) map their inner keys to the line of `x`.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Sequence

from tuikiln.errors import Problem

KeyPath = tuple[str | int, ...]

_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(?:#.*)?$")
_KEY = re.compile(r"""^\s*("[^"]*"|'[^']*'|[A-Za-z0-9_\-]+(?:\s*\.\s*[A-Za-z0-9_\-]+)*)\s*=""")


def _split_dotted(text: str) -> list[str]:
    return [part.strip().strip("\"'") for part in text.split(".")]


class LineMap:
    """Key path -> line number (1-based) for one TOML text."""

    def __init__(self, text: str) -> None:
        self.lines: dict[KeyPath, int] = {}
        array_counts: dict[tuple[str, ...], int] = {}
        table: KeyPath = ()
        in_multiline: str | None = None
        for number, raw in enumerate(text.splitlines(), start=1):
            line = raw.strip()
            if in_multiline:
                if line.count(in_multiline) % 2 == 1:
                    in_multiline = None
                continue
            if not line or line.startswith("#"):
                continue
            header = _HEADER.match(raw)
            if header and not _KEY.match(raw):
                names = tuple(_split_dotted(header.group(2)))
                if header.group(1) == "[[":
                    index = array_counts.get(names, 0)
                    array_counts[names] = index + 1
                    table = self._resolve(names[:-1], array_counts) + (names[-1], index)
                else:
                    table = self._resolve(names, array_counts)
                self.lines.setdefault(table, number)
                continue
            key = _KEY.match(raw)
            if key:
                path = table + tuple(_split_dotted(key.group(1)))
                self.lines.setdefault(path, number)
                for quote in ('"""', "'''"):
                    if raw.count(quote) == 1:
                        in_multiline = quote

    @staticmethod
    def _resolve(names: Sequence[str], counts: dict[tuple[str, ...], int]) -> KeyPath:
        # `[step.extra]` inside an array of tables belongs to the latest `[[step]]`.
        path: list[str | int] = []
        for i, name in enumerate(names):
            path.append(name)
            prefix = tuple(names[: i + 1])
            if prefix in counts:
                path.append(counts[prefix] - 1)
        return tuple(path)

    def line(self, path: KeyPath) -> int | None:
        """The line of `path`, or of its nearest enclosing table or key."""
        path = tuple(path)
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return None


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
