"""The toy alert channel of tests/examples/event_file_channel.py, from the kiln file to a run."""

from __future__ import annotations

import contextlib
import io
import json
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

from tuikiln.alerts import channels
from tuikiln.cli import main
from tuikiln.errors import FileProblems
from tuikiln.kiln import load_kiln

ROOT = Path(__file__).resolve().parents[2]
PROFILE = ROOT / "profiles" / "dry-run.toml"


@pytest.fixture
def event_file() -> Iterator[None]:
    from tests.examples import event_file_channel  # registers the channel on import

    channels.register_channel(event_file_channel.CHANNEL)  # again, for a second test
    yield
    channels.forget_channel("event_file")  # other tests see the shipped channels only


def test_the_kiln_file_checks_the_table_with_lines(event_file: None,
                                                   kiln_file: Callable[..., Path]) -> None:
    kiln = kiln_file('name = "Bench"\n[event_file]\npth = "x.jsonl"\nalarms_only = "no"\n')
    with pytest.raises(FileProblems) as caught:
        load_kiln(kiln)
    found = {p.line: p.message for p in caught.value.problems}
    assert found[3] == 'unknown key "pth" (did you mean "path"?)'
    assert found[4] == '"alarms_only" must be true or false (no quotes)'
    assert found[2] == 'say where: path = "events.jsonl"'
    missing = kiln_file('name = "Bench"\n[event_file]\npath = "no/such/folder/x.jsonl"\n')
    with pytest.raises(FileProblems, match="no such folder"):
        load_kiln(missing)


def test_unregistered_the_table_is_an_unknown_key(kiln_file: Callable[..., Path]) -> None:
    with pytest.raises(FileProblems, match='unknown key "event_file"'):
        load_kiln(kiln_file('name = "Bench"\n[event_file]\npath = "x.jsonl"\n'))


def test_a_run_writes_its_events_to_the_file(event_file: None, data_folder: Path,
                                             kiln_file: Callable[..., Path]) -> None:
    kiln = kiln_file('name = "Bench"\n[event_file]\npath = "events.jsonl"\n'
                     "alarms_only = false\n")
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["--data", str(data_folder), "--kiln", str(kiln), "run", str(PROFILE),
                     "--headless", "--speed", "max", "--auto-continue"]) == 0
    lines = [json.loads(line) for line in (kiln.parent / "events.jsonl").read_text().splitlines()]
    kinds = [line["kind"] for line in lines]
    assert kinds[0] == "run-start" and kinds[-1] == "run-end"
    assert "step-start" in kinds
