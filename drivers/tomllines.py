"""Where keys sit in a TOML file, because `tomllib` keeps no positions.

`LineMap(text)` maps every key path to its 1-based line: ("step", 3, "hold") for the key
`hold` of the fourth `[[step]]`, ("read", "chamber", "fc") for a key inside an inline
table, ("hook", 0, "run", 2) for the third element of an array. It is the one line mapper
of the project: the kiln file, profiles and register maps all use it.

It is a small scanner of TOML's own grammar (strings of all four kinds, comments, arrays and
inline tables over several lines, dotted and quoted keys, arrays of tables), not a scan of
lines that look like `key =`: a line such as `[alarms]` inside a multi-line string, or an
array whose last element `["a"]` stands alone on its line, must not be taken for a header.
It lives in drivers/ because drivers may import nothing of tuikiln, and both need it.
It never raises: on text it cannot follow it keeps what it found so far (the files it is
given have already been parsed by tomllib).
"""

from __future__ import annotations

import bisect
import re
import tomllib

KeyPath = tuple[str | int, ...]

_BARE_KEY = re.compile(r"[A-Za-z0-9_\-]+")
_SCALAR_END = re.compile(r"[,\]}\n#]")


class _Stop(Exception):
    """The text is not TOML the scanner can follow; keep what was found."""


class LineMap:
    """Key path -> line number (1-based) for one TOML text."""

    def __init__(self, text: str) -> None:
        self.lines: dict[KeyPath, int] = {}
        self._text = text
        self._pos = 0
        self._newlines = [i for i, c in enumerate(text) if c == "\n"]
        self._array_counts: dict[KeyPath, int] = {}
        try:
            self._document()
        except (_Stop, IndexError, tomllib.TOMLDecodeError, RecursionError):
            pass
        del self._text, self._newlines

    def line(self, path: KeyPath) -> int | None:
        """The line of `path`, or of its nearest enclosing table or key."""
        path = tuple(path)
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return None

    # ---- scanning ------------------------------------------------------------------

    def _line_at(self, pos: int) -> int:
        return bisect.bisect_left(self._newlines, pos) + 1

    def _peek(self, n: int = 1) -> str:
        return self._text[self._pos:self._pos + n]

    def _skip_blank(self, newlines: bool) -> None:
        """Skip spaces and comments (and newlines where the grammar allows them)."""
        text = self._text
        while self._pos < len(text):
            c = text[self._pos]
            if c in " \t\r" or (newlines and c == "\n"):
                self._pos += 1
            elif c == "#":
                end = text.find("\n", self._pos)
                self._pos = len(text) if end < 0 else end
            else:
                return

    def _record(self, path: KeyPath, pos: int) -> None:
        self.lines.setdefault(path, self._line_at(pos))

    def _document(self) -> None:
        table: KeyPath = ()
        while True:
            self._skip_blank(newlines=True)
            if self._pos >= len(self._text):
                return
            start = self._pos
            if self._peek(2) == "[[":
                self._pos += 2
                names = self._key()
                self._expect("]]")
                table = self._array_table(names)
                self._record(table, start)
            elif self._peek() == "[":
                self._pos += 1
                table = self._resolve(self._key())
                self._expect("]")
                self._record(table, start)
            else:
                self._key_value(table)
            self._skip_blank(newlines=False)

    def _array_table(self, names: tuple[str, ...]) -> KeyPath:
        parent = self._resolve(names[:-1])
        whole = parent + (names[-1],)
        index = self._array_counts.get(whole, 0)
        self._array_counts[whole] = index + 1
        self._record(whole, self._pos)
        return whole + (index,)

    def _resolve(self, names: tuple[str, ...]) -> KeyPath:
        # `[step.extra]` inside an array of tables belongs to the latest `[[step]]`.
        path: KeyPath = ()
        for name in names:
            path = path + (name,)
            if path in self._array_counts:
                path = path + (self._array_counts[path] - 1,)
        return path

    def _expect(self, token: str) -> None:
        self._skip_blank(newlines=False)
        if self._peek(len(token)) != token:
            raise _Stop
        self._pos += len(token)

    def _key(self) -> tuple[str, ...]:
        parts: list[str] = []
        while True:
            self._skip_blank(newlines=False)
            c = self._peek()
            if c == '"' or c == "'":
                start = self._pos
                self._single_line_string(c)
                # tomllib decodes the escapes exactly as the file's reader did
                parts.append(tomllib.loads("k = " + self._text[start:self._pos])["k"])
            else:
                match = _BARE_KEY.match(self._text, self._pos)
                if not match:
                    raise _Stop
                parts.append(match.group(0))
                self._pos = match.end()
            self._skip_blank(newlines=False)
            if self._peek() != ".":
                return tuple(parts)
            self._pos += 1

    def _key_value(self, table: KeyPath) -> None:
        start = self._pos
        names = self._key()
        for depth in range(1, len(names) + 1):
            self._record(table + names[:depth], start)
        self._expect("=")
        self._skip_blank(newlines=False)
        self._value(table + names)

    def _value(self, path: KeyPath) -> None:
        c = self._peek()
        if self._peek(3) in ('"""', "'''"):
            self._multi_line_string(self._peek(3))
        elif c in "\"'":
            self._single_line_string(c)
        elif c == "[":
            self._array(path)
        elif c == "{":
            self._inline_table(path)
        else:
            end = _SCALAR_END.search(self._text, self._pos)
            self._pos = len(self._text) if end is None else end.start()

    def _single_line_string(self, quote: str) -> None:
        text = self._text
        i = self._pos + 1
        while i < len(text) and text[i] != quote and text[i] != "\n":
            i += 2 if quote == '"' and text[i] == "\\" else 1
        if i >= len(text) or text[i] != quote:
            raise _Stop
        self._pos = i + 1

    def _multi_line_string(self, quotes: str) -> None:
        text = self._text
        i = self._pos + 3
        while True:
            end = text.find(quotes, i)
            if end < 0:
                raise _Stop
            backslashes = 0
            while quotes == '"""' and text[end - 1 - backslashes] == "\\":
                backslashes += 1
            if backslashes % 2 == 0:
                break
            i = end + 1
        # `""""` closes with one quote left in the string: up to two may stand before
        # the closing three, so the closing quotes are the last of the run
        close = end
        while close + 3 < len(text) and text[close + 3] == quotes[0] and close - end < 2:
            close += 1
        self._pos = close + 3

    def _array(self, path: KeyPath) -> None:
        self._pos += 1
        index = 0
        while True:
            self._skip_blank(newlines=True)
            if self._peek() == "]":
                self._pos += 1
                return
            self._record(path + (index,), self._pos)
            self._value(path + (index,))
            index += 1
            self._skip_blank(newlines=True)
            if self._peek() == ",":
                self._pos += 1
            elif self._peek() != "]":
                raise _Stop

    def _inline_table(self, path: KeyPath) -> None:
        self._pos += 1
        while True:
            self._skip_blank(newlines=False)
            if self._peek() == "}":
                self._pos += 1
                return
            self._key_value(path)
            self._skip_blank(newlines=False)
            if self._peek() == ",":
                self._pos += 1
            elif self._peek() != "}":
                raise _Stop
