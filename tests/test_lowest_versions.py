"""tests/lowest_versions.py, which feeds the CI's lowest-versions job (.ci/run): each
requirement of pyproject.toml pinned to its declared lower bound (PEP 440 `>=` and `==`)."""

from __future__ import annotations

import re
import tomllib

from tests import lowest_versions


def test_each_lower_bound_becomes_a_pin_and_the_higher_of_two_wins() -> None:
    project = {"project": {
        "dependencies": ["numpy>=1.26", "Foo_Bar >= 2.0, <3", "plain"],
        "optional-dependencies": {"test": ["foo-bar>=2.5", "numpy>=1.20"]},
    }}
    assert lowest_versions.pins(project, ["test"]) == [
        "numpy==1.26", "foo-bar==2.5", "plain"]
    assert lowest_versions.pins(project, []) == ["numpy==1.26", "Foo_Bar==2.0", "plain"]


def test_every_dependency_of_the_project_has_a_lower_bound_to_test() -> None:
    # A requirement without `>=` would leave the job testing whatever is newest.
    with lowest_versions.PYPROJECT.open("rb") as handle:
        pyproject = tomllib.load(handle)
    pins = lowest_versions.pins(pyproject, ["test"])
    assert all(re.fullmatch(r"[A-Za-z0-9._-]+==\d+(\.\d+)*", pin) for pin in pins), pins
    names = {pin.split("==")[0].lower() for pin in pins}
    assert {"textual", "pymodbus", "aiomqtt", "numpy", "pyserial", "platformdirs"} <= names
