"""A house that explains itself: no function or method in tuikiln/, drivers/ or simulator/
(all of them installed as the package tuikiln) takes more than MAX_PARAMETERS parameters.

A parameter is every name a caller may pass: positional, keyword-only, *args and **kwargs
each count one; `self` and `cls` do not. A dataclass's generated `__init__` is not counted:
its fields are a value's parts, each named where it is built (a signature written by hand
is what this is about).

Why 8: after the run engine's split (tuikiln/engine/runner.py) the widest engine signature is
`host_engine` with 8 (the kiln, the profile, the device, the data folder and the engine's
settings, then terminal, alerts and resume), and RunEngine itself takes 7. Wider than that,
what travels together belongs in a small frozen value (`RunSettings`, `SafetyWiring`). Lints'
usual 5 would split the domain's plain signatures (a detector's target, band, window, slope
and confirmation time) into values with no name of their own.

WIDER names each function that was wider than that before this check and is not yet split,
with its width then: it may shrink, never grow, and an entry leaves the table as soon as it
fits (the test says so), so the table only gets shorter. Common practice, no source.

The tests keep a house rule of their own (DEVELOPERS.md, "Tests"): no fixed sleeps. A test
waits on the condition it needs (tests/waiting.py: `wait_until`, `await eventually`, `await
writable`); a pause that is part of what a test does goes through `let_time_pass(seconds,
why)` / `await time_passes(seconds, why)` with its reason written beside it, so every
remaining one is visible; a screen test waits with tests/test_ui_fakes.py `shown`, never
Textual's `pilot.pause(delay)` (`pilot.pause()`, until the app is idle, is a condition).
tests/bench/ is left out (benchmarks measure time on purpose), and so is tests/waiting.py,
where the helpers themselves sleep. Code in a string (a script a test writes out for a child
process) is the child's, not the test's.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
FOLDERS = ("tuikiln", "drivers", "simulator")
MAX_PARAMETERS = 8

WIDER: dict[str, int] = {
    # the run log is being changed elsewhere; its widths wait for that
    "tuikiln/runlog.py:RunLog.start_run": 12,
    "tuikiln/runlog.py:RunRecorder.sample": 9,
    # analysis and models: arrays and a model's numbers, each its own thing
    "tuikiln/analysis/whatif.py:rerun_rules": 14,
    "tuikiln/analysis/replay.py:replay_run": 12,
    "tuikiln/ovenmodel.py:_from_coef": 13,
    "tuikiln/analysis/loading.py:from_log": 9,
    "tuikiln/equalize.py:EqualizeDetector.__init__": 10,
    "tuikiln/equalize.py:LoadWatch.__init__": 9,
    "tuikiln/equalize.py:detect_over": 9,
    "tuikiln/coremodel.py:LoadModel.__init__": 10,
    # the alerts' wiring
    "tuikiln/alerts/mqtt.py:MqttPublisher.__init__": 11,
    "tuikiln/alerts/__init__.py:build_alerts": 11,
    "tuikiln/alerts/hooks.py:HookRunner.__init__": 9,
    # the live chart
    "tuikiln/ui/chartdata.py:live_chart": 9,
}


def parameter_count(args: ast.arguments) -> int:
    names = [a.arg for a in (*args.posonlyargs, *args.args, *args.kwonlyargs)]
    if names and names[0] in ("self", "cls"):
        names = names[1:]
    return len(names) + (args.vararg is not None) + (args.kwarg is not None)


def widths(source: str, where: str) -> dict[str, int]:
    """Each function and method in `source` (nested ones too) by `where:Class.name`."""
    found: dict[str, int] = {}

    def visit(node: ast.AST, prefix: str) -> None:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.ClassDef):
                visit(child, f"{prefix}{child.name}.")
            elif isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef):
                found[f"{where}:{prefix}{child.name}"] = parameter_count(child.args)
                visit(child, f"{prefix}{child.name}.")
            else:
                visit(child, prefix)

    visit(ast.parse(source), "")
    return found


def house_widths() -> dict[str, int]:
    found: dict[str, int] = {}
    for folder in FOLDERS:
        for path in sorted((ROOT / folder).rglob("*.py")):
            where = path.relative_to(ROOT).as_posix()
            found.update(widths(path.read_text(encoding="utf-8"), where))
    return found


def test_the_count_sees_every_kind_of_parameter() -> None:
    """The check below could pass because the count is blind: show it counts."""
    source = ("class A:\n"
              "    def __init__(self, a, /, b, *c, d, **e):\n"
              "        def inner(x, y=1): pass\n"
              "def f(p, q, *, r): pass\n")
    assert widths(source, "x.py") == {"x.py:A.__init__": 5, "x.py:A.__init__.inner": 2,
                                      "x.py:f": 3}


def test_the_count_finds_the_run_engine() -> None:
    found = house_widths()
    assert found["tuikiln/engine/runner.py:RunEngine.__init__"] == 7
    assert len(found) > 1000  # the whole house was read, not one folder


def test_no_function_takes_more_than_the_bound() -> None:
    found = house_widths()
    too_wide = {name: n for name, n in found.items()
                if n > max(MAX_PARAMETERS, WIDER.get(name, 0))}
    assert not too_wide, (
        f"more than {MAX_PARAMETERS} parameters (group what travels together into a small "
        f"frozen dataclass, as tuikiln/engine/runner.py RunSettings does): {too_wide}")


def test_the_table_of_wider_ones_only_shrinks() -> None:
    found = house_widths()
    gone = sorted(name for name in WIDER if name not in found)
    assert not gone, f"in WIDER but no longer in the code (take them out): {gone}"
    narrower = {name: found[name] for name, n in WIDER.items() if found[name] < n}
    assert not narrower, f"narrower now: lower or drop their WIDER entries: {narrower}"


# ----- the tests: no fixed sleeps -----
TESTS = ROOT / "tests"
SLEEPY_MODULES = ("time", "asyncio")
PAUSES = ("let_time_pass", "time_passes")


def scanned_files() -> list[Path]:
    return sorted(p for p in TESTS.rglob("*.py")
                  if "bench" not in p.relative_to(TESTS).parts[:1] and p.name != "waiting.py")


def bare_sleeps(source: str, filename: str = "<test>") -> list[str]:
    """`file:line what` for each use of time.sleep / asyncio.sleep (called or passed on)
    and each Textual `pilot.pause(delay)`."""
    tree = ast.parse(source, filename=filename)
    names = set(SLEEPY_MODULES)  # what the modules are called here (`import time as t`)
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {a.asname for a in node.names if a.name in SLEEPY_MODULES and a.asname}
    found: list[tuple[int, str]] = []
    for node in ast.walk(tree):
        if (isinstance(node, ast.Attribute) and node.attr == "sleep"
                and isinstance(node.value, ast.Name) and node.value.id in names):
            found.append((node.lineno, f"{node.value.id}.sleep"))
        elif isinstance(node, ast.ImportFrom) and node.module in SLEEPY_MODULES:
            if any(a.name in ("sleep", "*") for a in node.names):
                found.append((node.lineno, f"from {node.module} import sleep"))
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
              and node.func.attr == "pause" and isinstance(node.func.value, ast.Name)
              and node.func.value.id == "pilot" and (node.args or node.keywords)):
            # Textual's pilot.pause(delay) sleeps; pilot.pause() waits for the app to be idle
            found.append((node.lineno, "pilot.pause(delay)"))
    return [f"{filename}:{line} {what}" for line, what in sorted(found)]


def unexplained_pauses(source: str, filename: str = "<test>") -> list[str]:
    """Calls of the pause helpers whose reason is not a non-empty string written there."""
    found = []
    for node in ast.walk(ast.parse(source, filename=filename)):
        if not isinstance(node, ast.Call):
            continue
        func = node.func
        name = func.id if isinstance(func, ast.Name) else (
            func.attr if isinstance(func, ast.Attribute) else "")
        if name not in PAUSES:
            continue
        why = node.args[1] if len(node.args) > 1 else next(
            (k.value for k in node.keywords if k.arg == "why"), None)
        written = (isinstance(why, ast.Constant) and isinstance(why.value, str)
                   and why.value.strip()) or isinstance(why, ast.JoinedStr)
        if not written:
            found.append(f"{filename}:{node.lineno} {name} without its reason written out")
    return found


def test_the_checker_sees_every_form_of_a_bare_sleep() -> None:
    """The scan below could pass because it saw nothing: show it sees these."""
    source = (
        "import asyncio\nimport time\nimport time as clock\nfrom time import sleep\n"
        "async def f(loop):\n"
        "    time.sleep(0.1)\n"
        "    await asyncio.sleep(0)\n"
        "    clock.sleep(1)\n"
        "    await loop.run_in_executor(None, time.sleep, 2)\n"
        "    subprocess.run(['sleep', '1'])\n"          # a program, not a pause of ours
        "    device.clock.sleep(60.0)\n"                # a simulated clock: no real time
        "    script = 'import time; time.sleep(60)'\n"  # a child's code
        "    await pilot.pause(0.1)\n"
        "    await pilot.pause()\n"                     # until the app is idle: a condition
    )
    assert [line.split(" ", 1)[1] for line in bare_sleeps(source)] == [
        "from time import sleep", "time.sleep", "asyncio.sleep", "clock.sleep", "time.sleep",
        "pilot.pause(delay)"]
    assert [f.split(":")[1].split()[0] for f in bare_sleeps(source)] == [
        "4", "6", "7", "8", "9", "13"]
    pauses = ("let_time_pass(1, 'paces the fake oven')\nlet_time_pass(1, '')\n"
              "let_time_pass(1, why=reason)\nawait time_passes(0.01, why=f'{n} ticks')\n")
    assert [f.split(":")[1].split()[0] for f in unexplained_pauses(pauses)] == ["2", "3"]


def test_no_fixed_sleeps_in_tests_outside_the_helpers() -> None:
    files = scanned_files()
    assert TESTS / "test_survive_line.py" in files and TESTS / "waiting.py" not in files
    assert not any("bench" in p.parts for p in files)
    found = []
    for path in files:
        source = path.read_text(encoding="utf-8")
        name = str(path.relative_to(TESTS.parent))
        found += bare_sleeps(source, name) + unexplained_pauses(source, name)
    assert not found, (
        "fixed sleeps in tests: wait on the condition (tests/waiting.py wait_until / "
        "eventually; a screen: tests/test_ui_fakes.py shown), or, where time must pass on "
        "purpose, say why with let_time_pass / time_passes:\n" + "\n".join(found))
