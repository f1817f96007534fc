"""Run mypy over tuikiln, its drivers and its simulator, as the installed package sees them.

pyproject.toml maps drivers/, simulator/ and profiles/ into the package (tuikiln.drivers, ...)
through setuptools' package-dir; the editable install finds them with an import hook that a
static checker cannot run, so mypy alone would see `tuikiln.drivers` as missing and every
driver type as Any. This script lays out the package as an install would, with symlinks
(build/mypy-tree/tuikiln: the entries of tuikiln/ plus drivers, simulator, profiles), runs
mypy there with the project's [tool.mypy] settings, and prints the messages with the source
paths (drivers/modbus.py, not tuikiln/drivers/modbus.py).

    python tests/typecheck.py          # exit 0 when clean; the messages otherwise
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
# Under build/ (git ignores it) and at a fixed place, so mypy's cache stays valid run to run.
TREE = ROOT / "build" / "mypy-tree"
MAPPED = {"drivers": "drivers", "simulator": "simulator", "profiles": "profiles"}


def lay_out_tree() -> Path:
    """The package as installed, made of links to the sources; rebuilt each time so a new
    module is never missed."""
    package = TREE / "tuikiln"
    if package.exists():
        shutil.rmtree(package)
    package.mkdir(parents=True)
    for entry in sorted((ROOT / "tuikiln").iterdir()):
        if entry.name == "__pycache__":
            continue
        (package / entry.name).symlink_to(entry)
    for name, folder in MAPPED.items():
        (package / name).symlink_to(ROOT / folder)
    return package


def source_path(line: str) -> str:
    """tuikiln/drivers/x.py -> drivers/x.py, so a message points at a file that exists."""
    for name, folder in MAPPED.items():
        prefix = f"tuikiln{os.sep}{name}{os.sep}"
        if line.startswith(prefix):
            return folder + os.sep + line[len(prefix):]
    return line


def run_mypy() -> tuple[int, str]:
    lay_out_tree()
    out = subprocess.run(
        [
            sys.executable, "-m", "mypy",
            "--config-file", str(ROOT / "pyproject.toml"),
            "--cache-dir", str(ROOT / ".mypy_cache"),
            "-p", "tuikiln",
        ],
        capture_output=True, text=True, cwd=TREE,
    )
    text = "\n".join(source_path(line) for line in (out.stdout + out.stderr).splitlines())
    return out.returncode, text


def main() -> int:
    code, text = run_mypy()
    print(text)
    return code


if __name__ == "__main__":
    raise SystemExit(main())
