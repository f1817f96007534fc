"""`tuikiln service`: the systemd unit that runs tuikiln as a service on this machine.

The unit (tuikiln/data/tuikiln.service) runs `tuikiln run --resume --headless`: at boot and
after a crash it carries on the kiln's unfinished run per the kiln file's `on_restart`, and
exits 0 when there is nothing to carry on. As a user service (`--user` writes the file):

    tuikiln service --user
    systemctl --user daemon-reload && systemctl --user enable --now tuikiln
    loginctl enable-linger $USER      # user services start at boot, without a login

or for the whole machine (`--system`, runs as the user who printed it, in the serial
ports' group):

    tuikiln service --system | sudo tee /etc/systemd/system/tuikiln.service
    sudo systemctl daemon-reload && sudo systemctl enable --now tuikiln

Without either it prints the user unit. The unit is hardened (file system read-only but the
data folder, no privileges, a system-call filter; see the unit's comments); the data folder
is made now, because systemd cannot make a folder writable that is not there yet.
"""

from __future__ import annotations

import argparse
import getpass
import grp
import os
import re
import shutil
import sys
from importlib import resources
from pathlib import Path

UNIT_NAME = "tuikiln.service"
SYSTEM_ONLY = "@SYSTEM@"
# Debian, Ubuntu, Fedora and Raspberry Pi OS give serial ports to "dialout", Arch to "uucp".
SERIAL_GROUPS = ("dialout", "uucp")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    which = parser.add_mutually_exclusive_group()
    which.add_argument("--user", action="store_true",
                       help="write the user unit to ~/.config/systemd/user/tuikiln.service "
                            "(without --user or --system the user unit is printed)")
    which.add_argument("--system", action="store_true",
                       help="print a unit for /etc/systemd/system (runs as you), not a user unit")
    parser.epilog = ("install: tuikiln service --user; systemctl --user daemon-reload; "
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


def serial_port(kiln: str | None) -> str | None:
    """The kiln file's serial port under /dev, if it names one (else None: the simulator,
    Modbus over TCP, or no kiln file)."""
    from tuikiln.kiln import load_kiln

    port = str(load_kiln(kiln).device.get("port", ""))
    return port if port.startswith("/dev/") else None


def serial_group(port: str | None) -> str | None:
    """The group that may open the port: its node's group if it is there, else the usual
    serial group of this system. None where neither is known (root owns a pty's group)."""
    if port:
        try:
            name = grp.getgrgid(os.stat(port).st_gid).gr_name
        except (OSError, KeyError):
            name = ""
        if name and name not in ("root", "tty"):
            return name
    for name in SERIAL_GROUPS:
        try:
            grp.getgrnam(name)
        except KeyError:
            continue
        return name
    return None


def unit_text(data_dir: Path, kiln: str | None, system: bool, port: str | None = None) -> str:
    template = resources.files("tuikiln").joinpath(f"data/{UNIT_NAME}").read_text("utf-8")
    kiln_part = f" --kiln {_quote(str(Path(kiln).expanduser().resolve()))}" if kiln else ""
    user = f"User={getpass.getuser()}\n" if system else ""
    device = f"{SYSTEM_ONLY}DeviceAllow={port} rw\n" if port else ""
    group = serial_group(port)
    # A user unit cannot add a group: the user must be in it already (README says so).
    groups = f"{SYSTEM_ONLY}SupplementaryGroups={group}\n" if group else ""
    text = (template.replace("@EXEC@", " ".join(_quote(w) for w in executable()))
            .replace("@DATA@", _quote(str(data_dir.expanduser().resolve())))
            .replace("@KILN@", kiln_part)
            .replace("@USER@\n", user)
            .replace("@DEVICE@", device)
            .replace("@GROUP@", groups)
            .replace("@WANTED_BY@", "multi-user.target" if system else "default.target"))
    lines = []
    for line in text.splitlines(keepends=True):
        if line.startswith(SYSTEM_ONLY):
            if system:
                lines.append(line[len(SYSTEM_ONLY):])
        else:
            lines.append(line)
    return "".join(lines)


def placeholders_left(unit: str) -> list[str]:
    """Template words not filled in (a unit with one would not start)."""
    return re.findall(r"@[A-Z_]+@", unit)


def user_unit_path() -> Path:
    config = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(config) / "systemd" / "user" / UNIT_NAME


def run(args: argparse.Namespace) -> int:
    from tuikiln.runlog import default_data_dir, private_folder

    data_dir = private_folder(default_data_dir(args.data).expanduser().resolve())
    unit = unit_text(data_dir, args.kiln, args.system, serial_port(args.kiln))
    if not args.user:
        sys.stdout.write(unit)
        return 0
    path = user_unit_path()
    replaced = path.exists() and path.read_text(encoding="utf-8", errors="replace") != unit
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(unit, encoding="utf-8")
    print(f"{'Replaced' if replaced else 'Wrote'} {path}")
    print("Next: systemctl --user daemon-reload && systemctl --user enable --now tuikiln")
    print("At boot without a login: loginctl enable-linger $USER. Serial port: your user "
          f"must be in the port's group ({serial_group(serial_port(args.kiln)) or 'dialout'}).")
    return 0
