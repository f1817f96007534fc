"""House rules for the tests themselves (DEVELOPERS.md, "Tests"): no fixed sleeps.

A test waits on the condition it needs (tests/waiting.py: `wait_until`, `await eventually`,
`await writable`). A pause that is part of what a test does goes through
`let_time_pass(seconds, why)` / `await time_passes(seconds, why)` with its reason written
beside it, so every remaining one is visible. tests/bench/ is left out (benchmarks measure
time on purpose), and so is tests/waiting.py, where the helpers themselves sleep. Code in a
string (a script a test writes out for a child process) is the child's, not the test's.
"""

from __future__ import annotations

import ast
from pathlib import Path

TESTS = Path(__file__).resolve().parent
SLEEPY_MODULES = ("time", "asyncio")
PAUSES = ("let_time_pass", "time_passes")


def scanned_files() -> list[Path]:
    return sorted(p for p in TESTS.rglob("*.py")
                  if "bench" not in p.relative_to(TESTS).parts[:1] and p.name != "waiting.py")


def bare_sleeps(source: str, filename: str = "<test>") -> list[str]:
    """`file:line what` for each use of time.sleep / asyncio.sleep (called or passed on)."""
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
    )
    assert [line.split(" ", 1)[1] for line in bare_sleeps(source)] == [
        "from time import sleep", "time.sleep", "asyncio.sleep", "clock.sleep", "time.sleep"]
    assert [f.split(":")[1].split()[0] for f in bare_sleeps(source)] == ["4", "6", "7", "8", "9"]
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
        "eventually), or, where time must pass on purpose, say why with let_time_pass / "
        "time_passes:\n" + "\n".join(found))
