"""The `tuikiln` command line.

Each command lives in its own module under `tuikiln.commands`; that module has
`add_arguments(parser)` and `run(args) -> int`, and its one line of help is in
COMMAND_HELP here. Modules are imported only when their command runs, so `tuikiln check`
never loads Textual (and `tuikiln --help` loads none of them).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sqlite3
import sys
from collections.abc import Sequence
from typing import NoReturn

from tuikiln import logsetup
from tuikiln.errors import FileProblems, UserError

# command name -> module (one line each, so adding a command touches one line).
COMMANDS: dict[str, str] = {
    "demo": "tuikiln.commands.demo",
    "home": "tuikiln.commands.home",
    "watch": "tuikiln.commands.watch",
    "review": "tuikiln.commands.review",
    "check": "tuikiln.commands.check",
    "plan": "tuikiln.commands.plan",
    "learn": "tuikiln.commands.learn",
    "probe": "tuikiln.commands.probe",
    "sim": "tuikiln.commands.sim",
    "thermocouple": "tuikiln.commands.thermocouple",
    "temper": "tuikiln.commands.temper",
    "run": "tuikiln.commands.run",
    "status": "tuikiln.commands.ctl",
    "pause": "tuikiln.commands.ctl",
    "resume": "tuikiln.commands.ctl",
    "skip": "tuikiln.commands.ctl",
    "abort": "tuikiln.commands.ctl",
    "ack": "tuikiln.commands.ctl",
    "note": "tuikiln.commands.ctl",
    "runs": "tuikiln.commands.runs",
    "export": "tuikiln.commands.runs",
    "replay": "tuikiln.commands.replay",
    "report": "tuikiln.commands.replay",
    "import": "tuikiln.commands.replay",
    "service": "tuikiln.commands.service",
    "completion": "tuikiln.commands.completion",
}

# Commands that draw a screen: Textual draws on the standard error, so their log goes to a file.
SCREEN_COMMANDS = frozenset({"demo", "home", "watch", "review"})

# Shown in `tuikiln --help` and each command's own --help; here, so no module is imported.
COMMAND_HELP: dict[str, str] = {
    "demo": "watch a whole harden-and-temper cycle on the built-in simulator, sped up",
    "home": "the home screen: kiln, profiles and recent runs; start, watch or replay a run",
    "watch": "watch the run going on in the live screen (leaving it leaves the run going)",
    "review": "look back at a past run on screen: chart against the plan, cursor, verdicts",
    "check": "check profile files and print a one-line summary of each",
    "plan": "show the planned curve of a profile (table, --json or --csv)",
    "learn": "learn the oven from a logged run: heating, losses, time constant, PID by SIMC",
    "probe": "connect to the kiln's device and print readings, to check wiring and settings",
    "sim": "the built-in software oven: `sim serve` answers Modbus RTU on a pty or TCP",
    "thermocouple": "convert thermocouple millivolts to temperature and back (NIST ITS-90)",
    "temper": "tempering parameter (Hollomon-Jaffe) and the equivalent time at another temperature",
    "run": "run a heat-treatment profile (in the background, or --headless in the foreground)",
    "status": "show what the run going on is doing (--json: the status object)",
    "pause": "pause the run: hold the current setpoint and stop the step clocks",
    "resume": "resume a paused run",
    "skip": "end the current step now and go on with the next",
    "abort": "end the run now and turn the heat off",
    "ack": "acknowledge an alarm (or all of them) or a pause step's prompt",
    "note": "add a note to the run log",
    "runs": "list the logged runs (--json)",
    "export": "write a logged run's samples as CSV",
    "replay": "hold a logged run against its profile: verdict per step, alarms, what-if",
    "report": "write a run's report: HTML (with its chart), Markdown (.md) or text (.txt)",
    "import": "replay another tool's CSV temperature log against a profile",
    "service": "print a systemd unit that resumes unfinished runs at boot and after a crash",
    "completion": "print a shell completion script (bash or zsh) for tuikiln's commands",
}


class _Parser(argparse.ArgumentParser):
    """argparse, but a mistake on the command line exits 1 like every other user mistake."""

    def error(self, message: str) -> NoReturn:
        self.print_usage(sys.stderr)
        self.exit(1, f"{self.prog}: {message}\n")


def _global_options() -> _Parser:
    """Options every command takes, before or after its name."""
    common = _Parser(add_help=False)
    common.add_argument(
        "--data",
        metavar="DIR",
        default=argparse.SUPPRESS,
        help="folder for run logs (default: $TUIKILN_DATA or the user's data folder)",
    )
    common.add_argument(
        "--kiln",
        metavar="FILE",
        default=argparse.SUPPRESS,
        help="kiln file (default: kiln.toml in the user's config folder; none: the simulator)",
    )
    common.add_argument(
        "--log-level",
        metavar="LEVEL",
        choices=logsetup.LEVELS,
        default=argparse.SUPPRESS,
        help="debug, info, warning (default) or error; also $TUIKILN_LOG_LEVEL. Logs go to "
        "the standard error (the journal under systemd); the screens' to "
        "DATA/logs/tuikiln.log. Libraries' own lines are shown only at debug",
    )
    return common


def _first_word(argv: Sequence[str]) -> str | None:
    """The first word on the line that is not an option (or an option's value)."""
    skip_next = False
    for word in argv:
        if skip_next:
            skip_next = False
        elif word in ("--data", "--kiln", "--log-level"):
            skip_next = True
        elif not word.startswith("-"):
            return word
    return None


def _chosen_command(argv: Sequence[str]) -> str | None:
    """The command named on the line; only its module is imported (Textual stays unloaded
    for `check`, and a command still being written cannot break the others)."""
    word = _first_word(argv)
    return word if word in COMMANDS else None


def _unknown_command(argv: Sequence[str]) -> str | None:
    word = _first_word(argv)
    return None if word is None or word in COMMANDS else word


def build_parser(argv: Sequence[str] = ()) -> argparse.ArgumentParser:
    chosen = _chosen_command(argv)
    common = _global_options()
    parser = _Parser(
        prog="tuikiln",
        description="Run and watch heat treatments on a small electric oven.",
        parents=[common],
        epilog="tuikiln is not a safety device: the oven needs an independent "
        "over-temperature limit.",
    )
    parser.add_argument("--version", action="version", version=_version())
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module_name in COMMANDS.items():
        help_text = COMMAND_HELP.get(name, "")
        p = sub.add_parser(name, help=help_text, description=help_text, parents=[common])
        p.set_defaults(_module=module_name)
        if name == chosen:
            importlib.import_module(module_name).add_arguments(p)
    return parser


def _version() -> str:
    from tuikiln import __version__

    return f"tuikiln {__version__}"


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    unknown = _unknown_command(argv)
    if unknown is not None:
        from tuikiln.drivers.checking import suggest

        print(f'tuikiln: unknown command "{unknown}"{suggest(unknown, list(COMMANDS))}; '
              "`tuikiln --help` lists them", file=sys.stderr)
        return 1
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return 0
    args.data = getattr(args, "data", None) or os.environ.get("TUIKILN_DATA") or None
    args.kiln = getattr(args, "kiln", None)
    args.log_level = logsetup.configure(getattr(args, "log_level", None))
    if args.command in SCREEN_COMMANDS:
        from tuikiln.runlog import default_data_dir

        logsetup.to_file(default_data_dir(args.data))
    module = importlib.import_module(args._module)
    try:
        return int(module.run(args) or 0)
    except FileProblems as exc:
        for problem in exc.problems:  # FILE:LINE: message, one a line, as compilers do
            print(problem, file=sys.stderr)
        return exc.exit_code
    except UserError as exc:
        print(f"tuikiln: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("tuikiln: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except sqlite3.Error as exc:  # a run log locked, damaged or read-only after opening
        print(f"tuikiln: the run log cannot be used: {exc or type(exc).__name__} (locked by "
              "another program, damaged, or read-only?)", file=sys.stderr)
        return 1
    except OSError as exc:  # a full disk, a read-only folder: in words, never a traceback
        where = f" ({exc.filename})" if exc.filename else ""
        print(f"tuikiln: {exc.strerror or exc}{where}", file=sys.stderr)
        return 1
