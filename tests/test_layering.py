"""The one-way layering of DEVELOPERS.md: tuikiln -> tuikiln.drivers -> (nothing of ours);
tuikiln.simulator imports nothing of ours; nothing imports the bare top-level names drivers
or simulator; the domain core loads neither Textual nor pyserial."""

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
    "tuikiln.ovenmodel",
    "tuikiln.ovenmodel_plan",
    "tuikiln.simc",
]


# The layers, by import name. drivers/ and simulator/ install inside the package as
# tuikiln.drivers and tuikiln.simulator (pyproject.toml), but stay layers of their own.
DRIVERS = "tuikiln.drivers"
SIMULATOR = "tuikiln.simulator"
APP = "tuikiln"
BARE = "bare"  # `import drivers` / `import simulator`: the names no install provides


def layer_of(module: str) -> str | None:
    """The layer an imported module belongs to; None for everything not ours."""
    for name in (DRIVERS, SIMULATOR):
        if module == name or module.startswith(name + "."):
            return name
    if module == APP or module.startswith(APP + "."):
        return APP
    if module.split(".")[0] in ("drivers", "simulator"):
        return BARE
    return None


def imported_layers(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names: list[str] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.extend(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            # `from tuikiln import drivers` names the layer in the imported name.
            names.extend(f"{node.module}.{alias.name}" for alias in node.names)
    layers = {layer_of(name) for name in names}
    layers.discard(None)
    return layers  # type: ignore[return-value]


def python_files(folder: str) -> list[Path]:
    return sorted((ROOT / folder).rglob("*.py"))


def our_python_files() -> list[Path]:
    folders = ("tuikiln", "drivers", "simulator", "profiles", "tests")
    return [path for folder in folders for path in python_files(folder)]


def test_layer_of_tells_the_layers_apart() -> None:
    assert layer_of("tuikiln.drivers.modbus") == DRIVERS
    assert layer_of("tuikiln.simulator") == SIMULATOR
    assert layer_of("tuikiln.engine.runner") == APP
    assert layer_of("tuikiln.driversx") == APP
    assert layer_of("drivers.base") == BARE
    assert layer_of("simulator") == BARE
    assert layer_of("serial") is None


def test_nothing_imports_the_bare_top_level_names() -> None:
    """An install has no top-level drivers or simulator: importing them works only in a
    source checkout, and loads a second copy of each module beside tuikiln.drivers."""
    for path in our_python_files():
        assert BARE not in imported_layers(path), f"{path}: use tuikiln.drivers / tuikiln.simulator"


def test_simulator_imports_nothing_of_ours() -> None:
    for path in python_files("simulator"):
        assert not imported_layers(path) - {SIMULATOR}, path


def test_drivers_import_nothing_from_tuikiln() -> None:
    for path in python_files("drivers"):
        layers = imported_layers(path)
        assert APP not in layers, path
        if path.name != "simdevice.py":
            assert SIMULATOR not in layers, f"{path}: only drivers/simdevice.py may use it"


def test_only_the_sim_command_and_adapter_import_the_simulator() -> None:
    allowed = {ROOT / "tuikiln" / "commands" / "sim.py"}
    for path in python_files("tuikiln"):
        if path not in allowed:
            assert SIMULATOR not in imported_layers(path), path


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
