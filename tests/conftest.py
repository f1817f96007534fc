"""Shared pytest options."""

from __future__ import annotations


def pytest_addoption(parser) -> None:  # noqa: ANN001
    # Property tests that drive whole runs on the simulator take a minute at their CI size;
    # `--slow` runs them many times longer (tests/test_trials.py).
    parser.addoption("--slow", action="store_true", default=False,
                     help="run the long versions of the profile trials")
