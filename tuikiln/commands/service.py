"""`tuikiln service`: print the systemd unit that runs tuikiln as a service on this machine.

The unit (tuikiln/data/tuikiln.service) runs `tuikiln run --resume --headless`: at boot and
after a crash it carries on the kiln's unfinished run per the kiln file's `on_restart`, and
exits 0 when there is nothing to carry on. Install it as a user service:

    tuikiln service > ~/.config/systemd/user/tuikiln.service
    systemctl --user daemon-reload && systemctl --user enable --now tuikiln
    loginctl enable-linger $USER      # user services start at boot, without a login

or for the whole machine (`--system`, runs as the user who printed it):

    tuikiln service --system | sudo tee /etc/systemd/system/tuikiln.service
    sudo systemctl daemon-reload && sudo systemctl enable --now tuikiln
"""

from __future__ import annotations

import argparse
import getpass
import os
import shutil
import sys
from importlib import resources
from pathlib import Path

HELP = "print a systemd unit that resumes unfinished runs at boot and after a crash"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--system", action="store_true",
                        help="a unit for /etc/systemd/system (runs as you), not a user unit")
    parser.epilog = ("install: tuikiln service > ~/.config/systemd/user/tuikiln.service; "
                     "systemctl --user enable --now tuikiln; loginctl enable-linger $USER")


def _quote(word: str) -> str:
    """A word for a systemd command line (quotes where it has spaces or quotes)."""
    if word and not any(c in word for c in " \t\"'\\;$%"):
        return word
    escaped = word.replace("\\", "\\\\").replace('"', '\\"').replace("%", "%%")
    return f'"{escaped}"'


def executable() -> list[str]:
    """How to start this tuikiln: its script beside this Python, else `python -m tuikiln`."""
    beside = Path(sys.executable).parent / "tuikiln"
    if beside.is_file() and os.access(beside, os.X_OK):
        return [str(beside)]
    found = shutil.which("tuikiln")
    if found:
        return [str(Path(found).resolve())]
    return [sys.executable, "-m", "tuikiln"]


def unit_text(data_dir: Path, kiln: str | None, system: bool) -> str:
    template = resources.files("tuikiln").joinpath("data/tuikiln.service").read_text("utf-8")
    kiln_part = f" --kiln {_quote(str(Path(kiln).expanduser().resolve()))}" if kiln else ""
    user = f"User={getpass.getuser()}\n" if system else ""
    return (template.replace("@EXEC@", " ".join(_quote(w) for w in executable()))
            .replace("@DATA@", _quote(str(data_dir.expanduser().resolve())))
            .replace("@KILN@", kiln_part)
            .replace("@USER@\n", user)
            .replace("@WANTED_BY@", "multi-user.target" if system else "default.target"))


def run(args: argparse.Namespace) -> int:
    from tuikiln.runlog import default_data_dir

    sys.stdout.write(unit_text(default_data_dir(args.data), args.kiln, args.system))
    return 0
