"""Logging, configured once for the whole command line (tuikiln.cli calls `configure`).

Where log lines go:
- a run in the foreground (`run --headless`) and the other plain commands: the standard
  error, one line each (under systemd that is the journal; a background run's standard error
  is its log file, DATA/logs/run-*.log);
- the screens (demo, home, watch, review, and a run that opens the live screen): the file
  DATA/logs/tuikiln.log, because Textual draws on the standard error and a log line there
  would tear the screen. The file is made only when something is logged.

Libraries' own log lines (pymodbus logs every timeout at ERROR, asyncio, aiomqtt, Python's
warnings) are dropped below `--log-level debug`: our own messages already say in plain words
what went wrong, and a second, technical line for the same fault only alarms. At debug every
library line is kept, for a bug report.
"""

from __future__ import annotations

import io
import logging
import os
import sys
from pathlib import Path

LEVELS = ("debug", "info", "warning", "error")
DEFAULT_LEVEL = "warning"
LEVEL_ENV = "TUIKILN_LOG_LEVEL"
LOG_FILE_NAME = "tuikiln.log"
OURS = "tuikiln"

_HANDLER_MARK = "_tuikiln_handler"


class _OursOrDebug(logging.Filter):
    """Keeps our records; a library's only when the whole log is at debug."""

    def __init__(self, debug: bool) -> None:
        super().__init__()
        self.debug = debug

    def filter(self, record: logging.LogRecord) -> bool:
        return self.debug or record.name == OURS or record.name.startswith(OURS + ".")


class _CurrentStderr(logging.Handler):
    """Writes to whatever sys.stderr is at the time (tests and screens swap it)."""

    def emit(self, record: logging.LogRecord) -> None:
        try:
            sys.stderr.write(self.format(record) + "\n")
            sys.stderr.flush()
        except Exception:  # logging must never end a run: logging's own convention
            self.handleError(record)


def chosen_level(option: str | None) -> str:
    """The level from --log-level, else $TUIKILN_LOG_LEVEL, else warning.

    A wrong word in the environment falls back to the default (an option is checked by
    argparse's choices; the environment has no one to answer)."""
    if option:
        return option
    from_env = os.environ.get(LEVEL_ENV, "").strip().lower()
    return from_env if from_env in LEVELS else DEFAULT_LEVEL


def _format(to_terminal: bool) -> logging.Formatter:
    # The journal stamps every line itself; a file or a bare terminal needs the time.
    under_journal = to_terminal and bool(os.environ.get("JOURNAL_STREAM"))
    stamp = "" if under_journal else "%(asctime)s "
    return logging.Formatter(f"{stamp}tuikiln %(levelname)s %(name)s: %(message)s",
                             datefmt="%Y-%m-%dT%H:%M:%S%z")


def _install(handler: logging.Handler, level: str) -> None:
    root = logging.getLogger()
    for old in [h for h in root.handlers if getattr(h, _HANDLER_MARK, False)]:
        root.removeHandler(old)
        old.close()
    setattr(handler, _HANDLER_MARK, True)
    handler.addFilter(_OursOrDebug(level == "debug"))
    root.addHandler(handler)
    root.setLevel(level.upper())
    logging.captureWarnings(True)  # warnings.warn() lines become py.warnings records


def configure(level: str | None = None) -> str:
    """Log to the standard error at LEVEL (see chosen_level); again replaces, never adds."""
    chosen = chosen_level(level)
    handler = _CurrentStderr()
    handler.setFormatter(_format(to_terminal=True))
    _install(handler, chosen)
    return chosen


class _LazyFile(logging.FileHandler):
    """A log file whose folder, and the file, are made at the first line logged: a screen
    that logs nothing leaves nothing behind (the demo's data folder is temporary)."""

    def _open(self) -> io.TextIOWrapper:  # logging's own hook, called at the first record
        from tuikiln.runlog import private_folder

        private_folder(Path(self.baseFilename).parent)
        return super()._open()

    def handleError(self, record: logging.LogRecord) -> None:  # noqa: N802 - logging's name
        # A log file that cannot be written (read-only, full) must not print a traceback
        # across the screen; the screen says what matters to the person itself.
        pass


def to_file(data_dir: Path) -> Path:
    """Send the log to DATA/logs/tuikiln.log from now on (before a screen opens)."""
    path = data_dir.expanduser().resolve() / "logs" / LOG_FILE_NAME
    handler = _LazyFile(path, encoding="utf-8", delay=True)
    handler.setFormatter(_format(to_terminal=False))
    level = logging.getLevelName(logging.getLogger().level).lower()
    _install(handler, level if level in LEVELS else DEFAULT_LEVEL)
    return path
