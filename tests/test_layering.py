"""The layering of DEVELOPERS.md, strict: every module under tuikiln/, drivers/, simulator/
and profiles/ is declared in exactly one layer below (a new module fails until it is), and
each layer imports only the layers it is allowed to. Plus the older rules: tuikiln ->
tuikiln.drivers -> (nothing of ours); tuikiln.simulator imports nothing of ours; nothing
imports the bare top-level names drivers or simulator; the domain core loads neither Textual
nor pyserial and reads no clock; readers of the run log open it read-only."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

# ----- the layers, lowest first. A module's name is its import name. -----
# Every module is listed by hand on purpose: a new module must be placed, so no module
# escapes the rules by being forgotten.
LAYERS: dict[str, tuple[str, ...]] = {
    # The software oven: imports nothing of ours.
    "simulator": (
        "tuikiln.simulator", "tuikiln.simulator.config", "tuikiln.simulator.controller",
        "tuikiln.simulator.kiln", "tuikiln.simulator.layouts", "tuikiln.simulator.modbus_rtu",
        "tuikiln.simulator.physics", "tuikiln.simulator.serve",
    ),
    # Devices behind one interface: nothing of tuikiln (simdevice alone sees the simulator).
    "drivers": (
        "tuikiln.drivers", "tuikiln.drivers.base", "tuikiln.drivers.errors",
        "tuikiln.drivers.factory", "tuikiln.drivers.fake", "tuikiln.drivers.guard",
        "tuikiln.drivers.its90", "tuikiln.drivers.its90_coefficients", "tuikiln.drivers.lines",
        "tuikiln.drivers.maps", "tuikiln.drivers.modbus", "tuikiln.drivers.serialport",
        "tuikiln.drivers.simdevice",
    ),
    # Plain helpers every layer above the simulator shares (settings tables, "did you mean",
    # TOML lines). They live in drivers/ because drivers may not import tuikiln; they import
    # only the standard library.
    "shared": ("tuikiln.drivers.checking", "tuikiln.drivers.tomllines"),
    # Example profiles (a data package).
    "data": ("tuikiln.profiles",),
    # Words, numbers and names everything else shares; they import only each other.
    "base": (
        "tuikiln", "tuikiln.errors", "tuikiln.units", "tuikiln.plaintext", "tuikiln.tomllines",
        "tuikiln.events", "tuikiln.materials", "tuikiln.equalize_slope", "tuikiln.thinning",
        "tuikiln.limits", "tuikiln.engine", "tuikiln.engine.states", "tuikiln.analysis",
    ),
    # The domain core: pure rules, `now` passed in, no screen, no port, no file of runs.
    "core": (
        "tuikiln.profile", "tuikiln.plan", "tuikiln.coremodel", "tuikiln.equalize",
        "tuikiln.engine.stepper", "tuikiln.engine.alarms", "tuikiln.engine.rules",
        "tuikiln.engine.stepper_arrays", "tuikiln.engine.alarm_arrays",
        "tuikiln.engine.status", "tuikiln.engine.checks",
        "tuikiln.analysis.csvlog", "tuikiln.analysis.csvsniff", "tuikiln.analysis.quench",
        "tuikiln.analysis.replay", "tuikiln.analysis.temper", "tuikiln.analysis.whatif",
        "tuikiln.analysis.report", "tuikiln.analysis.report_svg",
        "tuikiln.ovenmodel", "tuikiln.ovenmodel_plan", "tuikiln.simc",
    ),
    # The kiln file and the alert channels it configures.
    "setup": (
        "tuikiln.kiln", "tuikiln.alerts", "tuikiln.alerts.settings", "tuikiln.alerts.discovery",
        "tuikiln.alerts.fanout", "tuikiln.alerts.hooks", "tuikiln.alerts.mqtt",
        "tuikiln.alerts.payloads", "tuikiln.alerts.remote", "tuikiln.alerts.channels",
    ),
    # The files the program keeps: the run log, the control socket, the one loader from a
    # log to a replay, learned oven models, its own log of messages.
    "record": ("tuikiln.runlog", "tuikiln.logqueue", "tuikiln.control",
               "tuikiln.analysis.loading", "tuikiln.ovenmodel_store", "tuikiln.logsetup"),
    # The engine's host: the async loop, restart recovery, the safe state.
    "host": ("tuikiln.engine.runner", "tuikiln.engine.recovery", "tuikiln.engine.safety",
             "tuikiln.engine.setpoint", "tuikiln.engine.saferetry", "tuikiln.engine.host"),
    # Screens and what feeds them.
    "ui": (
        "tuikiln.ui", "tuikiln.ui.app", "tuikiln.ui.chartdata", "tuikiln.ui.chartdraw",
        "tuikiln.ui.controllink", "tuikiln.ui.inprocess", "tuikiln.ui.launcher",
        "tuikiln.ui.loglink", "tuikiln.ui.runfeed", "tuikiln.ui.words",
        "tuikiln.ui.screens", "tuikiln.ui.screens.confirm", "tuikiln.ui.screens.help",
        "tuikiln.ui.screens.home", "tuikiln.ui.screens.live", "tuikiln.ui.screens.note",
        "tuikiln.ui.screens.preview", "tuikiln.ui.screens.replay",
        "tuikiln.ui.widgets", "tuikiln.ui.widgets.alarm_banner", "tuikiln.ui.widgets.chart",
        "tuikiln.ui.widgets.event_log", "tuikiln.ui.widgets.readout",
        "tuikiln.ui.widgets.textupdate", "tuikiln.ui.glyphs", "tuikiln.ui.widgets.key_footer",
    ),
    # The command line: the top, may use everything.
    "commands": (
        "tuikiln.__main__", "tuikiln.cli", "tuikiln.commands", "tuikiln.commands.check",
        "tuikiln.commands.ctl", "tuikiln.commands.demo", "tuikiln.commands.home",
        "tuikiln.commands.plan", "tuikiln.commands.probe", "tuikiln.commands.probe_scan",
        "tuikiln.commands.replay", "tuikiln.commands.review", "tuikiln.commands.run",
        "tuikiln.commands.runs", "tuikiln.commands.service",
        "tuikiln.commands.completion", "tuikiln.commands.sim",
        "tuikiln.commands.temper", "tuikiln.commands.thermocouple", "tuikiln.commands.watch",
        "tuikiln.commands.learn",
    ),
}

# What each layer may import besides itself. The simulator is reached only through
# drivers/simdevice.py and `tuikiln sim serve` (checked below, module by module).
ALLOWED: dict[str, set[str]] = {
    "simulator": set(),
    "shared": set(),
    "drivers": {"shared", "simulator"},
    "data": set(),
    "base": {"shared"},
    "core": {"shared", "base"},
    "setup": {"shared", "base", "core", "drivers"},
    "record": {"shared", "base", "core", "setup"},
    "host": {"shared", "base", "core", "setup", "record", "drivers"},
    "ui": {"shared", "base", "core", "setup", "record", "host", "drivers"},
    "commands": {"shared", "base", "core", "setup", "record", "host", "ui", "drivers",
                 "simulator", "data"},
}

# The domain core: pure rules, no screen, no serial port, no clock.
CORE_MODULES = LAYERS["base"] + LAYERS["core"]


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


def test_core_loads_neither_textual_nor_serial() -> None:
    """Every module of the core, imported in one fresh interpreter; a heavy library is
    blamed on the first module whose import brought it in."""
    code = (
        "import importlib, json, sys\n"
        "blame = {}\n"
        f"for module in {list(CORE_MODULES)!r}:\n"
        "    importlib.import_module(module)\n"
        "    for lib in ('textual', 'serial', 'pymodbus', 'aiomqtt', 'sqlite3'):\n"
        "        if lib in sys.modules and lib not in blame:\n"
        "            blame[lib] = module\n"
        "print(json.dumps(blame))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "{}", f"library: first core module to load it: {out.stdout}"


# ----- the declared layers -----

FOLDERS = {"tuikiln": "tuikiln", "drivers": "tuikiln.drivers",
           "simulator": "tuikiln.simulator", "profiles": "tuikiln.profiles"}
LAYER_OF_MODULE = {module: layer for layer, modules in LAYERS.items() for module in modules}
# Packages of plugins, one module each, that the package finds by itself (engine/checks: the
# alarm rules, alerts/channels: the alert channels; docs/CONTRIBUTING.md): a module there is
# in its package's layer, declared by the package, so a new one needs no line here.
PLUGIN_PACKAGES = ("tuikiln.engine.checks", "tuikiln.alerts.channels")


def in_plugin_package(module: str) -> bool:
    return module.rpartition(".")[0] in PLUGIN_PACKAGES


def module_name(path: Path) -> str:
    """The import name of a source file (drivers/x.py installs as tuikiln.drivers.x)."""
    relative = path.relative_to(ROOT)
    parts = [FOLDERS[relative.parts[0]], *relative.with_suffix("").parts[1:]]
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def modules_on_disk() -> dict[str, Path]:
    return {module_name(path): path for folder in FOLDERS for path in python_files(folder)}


def imported_modules(path: Path, module: str) -> set[str]:
    """Every module of ours that `path` imports anywhere (inside functions too, and under
    TYPE_CHECKING: a type-only import is still a dependency on the layer)."""
    known = set(modules_on_disk())
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                base = ".".join([*anchor, base] if base else anchor)
            for alias in node.names:
                # `from tuikiln.analysis import temper` imports the module tuikiln.analysis.temper
                found.add(f"{base}.{alias.name}" if f"{base}.{alias.name}" in known else base)
    return {name for name in found if name == "tuikiln" or name.startswith("tuikiln.")}


def declared_layer(module: str) -> str:
    """The layer of an imported name: the module's own, or its package's."""
    name = module
    while name not in LAYER_OF_MODULE:
        name = name.rpartition(".")[0]
        assert name, f"{module} belongs to no layer"
    return LAYER_OF_MODULE[name]


def test_every_module_is_in_exactly_one_layer() -> None:
    on_disk = modules_on_disk()
    missing = sorted(m for m in set(on_disk) - set(LAYER_OF_MODULE) if not in_plugin_package(m))
    assert not missing, (
        "in no layer (add each to LAYERS in tests/test_layering.py): "
        + ", ".join(f"{m} ({on_disk[m].relative_to(ROOT)})" for m in missing))
    gone = sorted(set(LAYER_OF_MODULE) - set(on_disk))
    assert not gone, f"declared but not found (remove from LAYERS): {', '.join(gone)}"
    declared = [module for modules in LAYERS.values() for module in modules]
    twice = sorted({m for m in declared if declared.count(m) > 1})
    assert not twice, f"declared in more than one layer: {', '.join(twice)}"


def test_each_layer_imports_only_what_it_may() -> None:
    wrong = []
    for module, path in sorted(modules_on_disk().items()):
        layer = declared_layer(module)
        for imported in sorted(imported_modules(path, module)):
            target = declared_layer(imported)
            if target != layer and target not in ALLOWED[layer]:
                wrong.append(f"{path.relative_to(ROOT)} ({layer}) imports {imported} ({target})")
    assert not wrong, "\n".join(wrong)


def test_analysis_never_imports_ui() -> None:
    """The report's chart and the screens' chart share tuikiln.thinning; analysis stays
    usable where no terminal library is installed."""
    for module, path in modules_on_disk().items():
        if module.startswith("tuikiln.analysis"):
            imported = imported_modules(path, module)
            assert not {m for m in imported if m.startswith("tuikiln.ui")}, path


def test_the_checker_sees_a_wrong_import(tmp_path: Path) -> None:
    """The rules above would pass vacuously if imports were never found: check the finder
    and the verdict on lines written for the purpose."""
    source = ROOT / "tuikiln" / "analysis" / "replay.py"
    found = imported_modules(source, "tuikiln.analysis.replay")
    assert "tuikiln.engine.rules" in found or "tuikiln.engine.stepper" in found
    fake = tmp_path / "fake.py"
    fake.write_text("from tuikiln.analysis import temper\nfrom tuikiln.ui import app\n"
                    "def later():\n    import tuikiln.commands.run\n", encoding="utf-8")
    found = imported_modules(fake, "tuikiln.analysis.fake")
    assert found == {"tuikiln.analysis.temper", "tuikiln.ui.app", "tuikiln.commands.run"}
    assert declared_layer("tuikiln.ui.app") not in ALLOWED["core"]
    assert declared_layer("tuikiln.drivers.modbus") == "drivers"


# Clock reads the core must not make: `now` is an argument (tests never sleep).
CLOCK_CALLS = {("time", "time"), ("time", "monotonic"), ("time", "perf_counter"),
               ("datetime", "now"), ("datetime", "utcnow"), ("datetime", "today"),
               ("date", "today")}


def test_core_reads_no_clock() -> None:
    on_disk = modules_on_disk()
    for module in CORE_MODULES:
        tree = ast.parse(on_disk[module].read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name):
                assert (node.value.id, node.attr) not in CLOCK_CALLS, (
                    f"{on_disk[module].relative_to(ROOT)}:{node.lineno}: "
                    f"{node.value.id}.{node.attr}: take `now` as an argument")
            if isinstance(node, ast.ImportFrom) and node.module in ("time", "datetime"):
                names = {alias.name for alias in node.names}
                assert not names & {"time", "monotonic", "perf_counter"}, (
                    f"{on_disk[module].relative_to(ROOT)}:{node.lineno}")


# ----- readers of the run log -----

# The engine's side: the only modules that may open the run log for writing.
RUNLOG_WRITERS = {"tuikiln.runlog", "tuikiln.engine.runner", "tuikiln.engine.host",
                  "tuikiln.commands.run"}


def _keyword_true(call: ast.Call, name: str) -> bool:
    return any(k.arg == name and isinstance(k.value, ast.Constant) and k.value.value is True
               for k in call.keywords)


def test_readers_of_the_run_log_open_it_read_only() -> None:
    """Outside the engine's side, the log is opened only through `RunLog.reader` or with
    read_only=True, and nobody starts a run or writes schema."""
    wrong = []
    for module, path in sorted(modules_on_disk().items()):
        if module in RUNLOG_WRITERS:
            continue
        text = path.read_text(encoding="utf-8")
        where = path.relative_to(ROOT)
        for node in ast.walk(ast.parse(text)):
            if not isinstance(node, ast.Call):
                continue
            func = node.func
            if isinstance(func, ast.Name) and func.id == "RunLog":
                if not _keyword_true(node, "read_only"):
                    wrong.append(f"{where}:{node.lineno}: RunLog(...): use RunLog.reader")
            elif isinstance(func, ast.Attribute):
                if (func.attr == "in_folder" and isinstance(func.value, ast.Name)
                        and func.value.id == "RunLog" and not _keyword_true(node, "read_only")):
                    wrong.append(f"{where}:{node.lineno}: RunLog.in_folder without read_only")
                if func.attr in ("start_run", "resume_run", "executescript"):
                    wrong.append(f"{where}:{node.lineno}: {func.attr}: only the engine writes")
        if "CREATE TABLE" in text.upper():
            wrong.append(f"{where}: creates schema")
    assert not wrong, "\n".join(wrong)


def _file_state(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir()) if p.is_file()}


def test_a_reader_changes_nothing_in_the_log(tmp_path: Path) -> None:
    """Opened read-only for real: every read gives the engine's rows, every write through the
    reader is refused by SQLite, and the files are byte for byte as the writer left them."""
    import sqlite3

    from tuikiln.events import Event
    from tuikiln.runlog import RUNLOG_NAME, RunLog
    from tuikiln.ui.loglink import LogLink

    writer = RunLog.in_folder(tmp_path)
    recorder = writer.start_run(kiln="bench", profile="p", started=100.0,
                                profile_text='name = "p"\nunits = "C"\n[[step]]\nhold = "1m"\n')
    for i in range(30):
        recorder.sample(100.0 + i, 20.0 + i, None, None, 25.0, 10.0, 0, 0, 0)
    recorder.event(Event(101.0, "note", "a note"))
    recorder.end("completed", 130.0)
    recorder.close()
    writer.close()
    before = _file_state(tmp_path)

    reader = RunLog.reader(tmp_path / RUNLOG_NAME)
    assert [r.outcome for r in reader.runs()] == ["completed"]
    assert reader.samples(recorder.run_id)["chamber_c"][-1] == 49.0
    assert [e["message"] for e in reader.events(recorder.run_id)] == ["a note"]
    for statement in ("CREATE TABLE x (a)", "DELETE FROM samples",
                      "INSERT INTO meta VALUES ('k', 'v')"):
        try:
            reader._conn.execute(statement)
        except sqlite3.OperationalError as exc:
            assert "readonly" in str(exc)
        else:
            raise AssertionError(f"a reader could run {statement!r}")
    reader.close()
    link = LogLink(tmp_path, recorder.run_id)
    assert len(link.read_samples(None)["t"]) == 30
    link.close()
    after = {name: data for name, data in _file_state(tmp_path).items()
             if not name.endswith(("-shm", "-wal"))}  # SQLite's shared index, not the log
    assert after == {name: data for name, data in before.items()
                     if not name.endswith(("-shm", "-wal"))}


def test_a_reader_makes_no_file_and_no_schema(tmp_path: Path) -> None:
    from tuikiln.runlog import RunLog

    missing = tmp_path / "none" / "runs.sqlite"
    assert RunLog.reader(missing).runs() == []
    assert not missing.parent.exists()
    empty = tmp_path / "empty.sqlite"
    empty.touch()  # the instant between the engine making the file and its schema
    assert RunLog.reader(empty).runs() == []
    assert empty.stat().st_size == 0


def test_a_reader_of_a_foreign_database_says_so_in_one_line(tmp_path: Path) -> None:
    import sqlite3

    from tuikiln.errors import UserError
    from tuikiln.runlog import RunLog

    other = tmp_path / "other.sqlite"
    with sqlite3.connect(other) as conn:
        conn.execute("CREATE TABLE notes (text TEXT)")
    size = other.stat().st_size
    try:
        RunLog.reader(other)
    except UserError as exc:
        assert "not a run log" in str(exc) and "\n" not in str(exc)
    else:
        raise AssertionError("a database without runs was read as a run log")
    assert other.stat().st_size == size
    with sqlite3.connect(other) as conn:
        names = {row[0] for row in conn.execute("SELECT name FROM sqlite_master")}
    assert names == {"notes"}  # no schema was added
