"""The `tuikiln` command line.

Each command lives in its own module under `tuikiln.commands`; that module has
`HELP` (one line), `add_arguments(parser)` and `run(args) -> int`. Modules are
imported only when their command runs, so `tuikiln check` never loads Textual.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence

from tuikiln.errors import UserError

# command name -> module (one line each, so adding a command touches one line).
COMMANDS: dict[str, str] = {
    "check": "tuikiln.commands.check",
    "plan": "tuikiln.commands.plan",
    "thermocouple": "tuikiln.commands.thermocouple",
    "temper": "tuikiln.commands.temper",
}

# Shown in `tuikiln --help`; the modules' HELP lines are read lazily.
COMMAND_HELP: dict[str, str] = {
    "check": "check profile files and print a one-line summary of each",
    "plan": "show the planned curve of a profile (table, --json or --csv)",
    "thermocouple": "convert thermocouple millivolts to temperature and back (NIST ITS-90)",
    "temper": "tempering parameter (Hollomon-Jaffe) and the equivalent time at another temperature",
}


def _global_options() -> argparse.ArgumentParser:
    """Options every command takes, before or after its name."""
    common = argparse.ArgumentParser(add_help=False)
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
    return common


def build_parser() -> argparse.ArgumentParser:
    common = _global_options()
    parser = argparse.ArgumentParser(
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
        module = importlib.import_module(module_name)
        module.add_arguments(p)
    return parser


def _version() -> str:
    from tuikiln import __version__

    return f"tuikiln {__version__}"


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return 0
    args.data = getattr(args, "data", None) or os.environ.get("TUIKILN_DATA") or None
    args.kiln = getattr(args, "kiln", None)
    module = importlib.import_module(args._module)
    try:
        return int(module.run(args) or 0)
    except UserError as exc:
        print(f"tuikiln: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("tuikiln: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
