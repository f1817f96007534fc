"""The one-way layering of DEVELOPERS.md: tuikiln -> drivers -> (nothing of ours);
simulator imports nothing of ours; the domain core loads neither Textual nor pyserial."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

# Modules of the domain core: pure rules, no screen, no serial port, no clock.
CORE_MODULES = [
    "tuikiln.units",
    "tuikiln.limits",
    "tuikiln.profile",
    "tuikiln.plan",
    "tuikiln.equalize",
    "tuikiln.engine.stepper",
    "tuikiln.engine.alarms",
    "tuikiln.analysis.temper",
    "tuikiln.analysis.quench",
    "tuikiln.analysis.replay",
]


def imported_roots(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    roots: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            roots.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            roots.add(node.module.split(".")[0])
    return roots


def python_files(folder: str) -> list[Path]:
    return sorted((ROOT / folder).rglob("*.py"))


def test_simulator_imports_nothing_of_ours() -> None:
    for path in python_files("simulator"):
        assert not imported_roots(path) & {"tuikiln", "drivers"}, path


def test_drivers_import_nothing_from_tuikiln() -> None:
    for path in python_files("drivers"):
        roots = imported_roots(path)
        assert "tuikiln" not in roots, path
        if path.name != "simdevice.py":
            assert "simulator" not in roots, f"{path}: only drivers/simdevice.py may use it"


def test_only_the_sim_command_and_adapter_import_the_simulator() -> None:
    allowed = {ROOT / "tuikiln" / "commands" / "sim.py"}
    for path in python_files("tuikiln"):
        if path not in allowed:
            assert "simulator" not in imported_roots(path), path


@pytest.mark.parametrize("module", CORE_MODULES)
def test_core_loads_neither_textual_nor_serial(module: str) -> None:
    code = (
        "import importlib, sys\n"
        f"try:\n    importlib.import_module({module!r})\n"
        "except ModuleNotFoundError as exc:\n"
        f"    if exc.name and {module!r}.startswith(exc.name):\n"
        "        print('missing'); raise SystemExit(0)\n"
        "    raise\n"
        "bad = [m for m in ('textual', 'serial', 'pymodbus') if m in sys.modules]\n"
        "print('loaded:', bad) if bad else print('clean')\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    if out.stdout.strip() == "missing":
        pytest.skip(f"{module} is not written yet")
    assert out.stdout.strip() == "clean", f"{module}: {out.stdout}"
