"""Errors that are the user's to fix: printed in plain words, never as a traceback."""

from __future__ import annotations

from dataclasses import dataclass


class UserError(Exception):
    """A mistake the user can act on; the command prints it and exits with `exit_code`."""

    exit_code = 1


@dataclass(frozen=True)
class Problem:
    """One mistake in a file: where it is and what is wrong, in plain words."""

    file: str
    line: int | None
    message: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line else self.file
        return f"{where}: {self.message}"


class FileProblems(UserError):
    """Every mistake found in one or more files (reported together, not only the first)."""

    def __init__(self, problems: list[Problem]) -> None:
        self.problems = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))
