"""Shared pytest options and fixtures.

Fixtures every test module may use without importing them:

- `data_folder`: a fresh data folder (returned) with no user kiln file: XDG_CONFIG_HOME,
  XDG_DATA_HOME and TUIKILN_DATA point into the test's tmp_path.
- `kiln_file(text, name="kiln.toml")`: writes a kiln file (or any TOML) into tmp_path and
  returns its path.
- `run_log`: a real SQLite run log (`RunLog`) in tmp_path, closed afterwards.
- `served_sim(*options)`: `tuikiln sim serve OPTIONS` in its own process (a real
  pseudo-terminal unless told `--tcp`), stopped with its process group afterwards.
- `mosquitto`, `mosquitto_factory`: a real mosquitto broker on a free loopback port
  (tests/mqtt_broker.py); the tests skip when mosquitto is not installed.

Waiting on conditions (never a fixed sleep): tests/waiting.py (`wait_until`, `eventually`,
`writable`); a pause that is part of a test is `let_time_pass` / `time_passes`, with its
reason (tests/test_house.py checks).

For engine tests (a plain function, imported: `from tests.conftest import oven_settings`):

- `oven_settings(**changes)`: the `RunSettings` most engine tests run with (`TEST_OVEN`: the
  "Test oven", °C, 1100 °C maximum, default limits, 1 s ticks), with any field changed
  (`tick_s=2.0`, `limits=...`, `kiln=KilnInfo(...)`). A test on a kiln file uses the
  product's own `tuikiln.engine.host.settings_for(kiln, profile)`.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Iterator
from dataclasses import replace
from pathlib import Path
from typing import Any

import pytest

from tests.mqtt_broker import mosquitto, mosquitto_factory  # noqa: F401 - fixtures
from tests.simserve import ServedSim
from tuikiln.engine.runner import KilnInfo, RunSettings
from tuikiln.limits import Limits
from tuikiln.runlog import RunLog

TEST_OVEN = RunSettings(KilnInfo("Test oven", "C", 1100.0), Limits())

FUZZ_TALLY: Counter[str] = Counter()
"""Hostile-input examples run per parser (tests/test_hostile_*.py count into it). Each test's
share rides on its report (`user_properties`), so the table at the end adds up the workers'
when the suite runs on several cores."""


@pytest.fixture(autouse=True)
def _fuzz_share(request: pytest.FixtureRequest) -> Iterator[None]:
    before = Counter(FUZZ_TALLY)
    yield
    share = FUZZ_TALLY - before
    if share:
        request.node.user_properties.append(("fuzz_examples", dict(share)))


def pytest_terminal_summary(terminalreporter: Any) -> None:
    total: Counter[str] = Counter()
    for reports in terminalreporter.stats.values():
        for report in reports:
            if getattr(report, "when", None) != "teardown":
                continue
            for key, value in getattr(report, "user_properties", ()):
                if key == "fuzz_examples":
                    total.update(value)
    if total:
        terminalreporter.section("hostile input: fuzz examples per parser")
        for name, count in sorted(total.items()):
            terminalreporter.write_line(f"{name:<28} {count:>6}")


def oven_settings(**changes: Any) -> RunSettings:
    """TEST_OVEN with the given fields changed (a RunSettings field each)."""
    return replace(TEST_OVEN, **changes)


def pytest_addoption(parser) -> None:  # noqa: ANN001
    # Property tests that drive whole runs on the simulator take a minute at their CI size;
    # `--slow` runs them many times longer (tests/test_trials.py).
    parser.addoption("--slow", action="store_true", default=False,
                     help="run the long versions of the profile trials")


@pytest.fixture
def data_folder(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))  # no user kiln file
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "share"))
    data = tmp_path / "data"
    monkeypatch.setenv("TUIKILN_DATA", str(data))
    return data


@pytest.fixture
def kiln_file(tmp_path: Path) -> Callable[..., Path]:
    def write(text: str, name: str = "kiln.toml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path

    return write


@pytest.fixture
def run_log(tmp_path: Path) -> Iterator[RunLog]:
    log = RunLog(tmp_path / "runs.sqlite")
    yield log
    log.close()


@pytest.fixture
def served_sim() -> Iterator[Callable[..., ServedSim]]:
    started: list[ServedSim] = []

    def serve(*options: str, wait_s: float = 15.0) -> ServedSim:
        sim = ServedSim(*options, wait_s=wait_s)
        started.append(sim)
        return sim

    yield serve
    for sim in started:
        sim.stop()
