"""mypy over tuikiln, drivers and simulator (tests/typecheck.py lays out the package the way
an install does, so the layers see each other's types). Part of the README's test command,
so CI runs it; run `python tests/typecheck.py` for the messages alone."""

from __future__ import annotations

import importlib.util

from tests.typecheck import lay_out_tree, run_mypy, source_path


def test_the_laid_out_tree_holds_every_layer() -> None:
    package = lay_out_tree()
    for module in ("engine/runner.py", "drivers/modbus.py", "simulator/physics.py"):
        assert (package / module).is_file(), module


def test_messages_name_the_source_files() -> None:
    assert source_path("tuikiln/drivers/modbus.py:3: error: x") == "drivers/modbus.py:3: error: x"
    assert source_path("tuikiln/plan.py:3: error: x") == "tuikiln/plan.py:3: error: x"


def test_mypy_finds_nothing() -> None:
    # Not a skip: mypy is in the test extra, and a check that quietly never ran is no check.
    assert importlib.util.find_spec("mypy") is not None, (
        "mypy is not installed: .venv/bin/pip install -q -e '.[test]'")
    code, text = run_mypy()
    assert code == 0, text
