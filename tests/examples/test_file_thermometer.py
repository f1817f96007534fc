"""The toy driver of tests/examples/file_thermometer.py: the kiln file, the device, a run."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

from tuikiln.cli import main
from tuikiln.drivers import factory
from tuikiln.drivers.errors import BadReply, LinkLost, NotSupported
from tuikiln.errors import FileProblems
from tuikiln.kiln import load_kiln


@pytest.fixture
def file_kind() -> Iterator[None]:
    from tests.examples import file_thermometer

    factory.register_driver(file_thermometer.KIND)  # what its line in factory.py does
    yield
    factory.forget_driver("file")


def test_the_kiln_file_names_the_kind_and_checks_its_keys(
        file_kind: None, kiln_file: Callable[..., Path]) -> None:
    kiln = kiln_file('name = "Bench"\nmax = 1100\n[device]\nkind = "file"\npoll = 0\n'
                     'paht = "t"\n')
    with pytest.raises(FileProblems) as caught:
        load_kiln(kiln)
    found = {p.line: p.message for p in caught.value.problems}
    assert found[5] == '"poll" must be from 0.1 to 3600, not 0'
    assert found[6] == 'unknown key "paht" (did you mean "path"?)'
    assert found[3] == 'say which file holds the temperature: path = "/run/oven/temp"'


def test_an_unregistered_kind_is_refused_with_the_known_ones(
        kiln_file: Callable[..., Path]) -> None:
    kiln = kiln_file('name = "Bench"\nmax = 1100\n[device]\nkind = "file"\npath = "t"\n')
    with pytest.raises(FileProblems, match='"kind" must be one of "sim", "modbus", "lines"'):
        load_kiln(kiln)


async def test_the_device_reads_millidegrees_and_refuses_to_heat(
        file_kind: None, tmp_path: Path) -> None:
    temp = tmp_path / "temp"
    temp.write_text("812500\n")
    device = factory.open_device({"kind": "file", "path": "temp", "poll": 0.5}, str(tmp_path))
    assert device.poll_s == 0.5
    async with device:
        assert (await device.read()).chamber_c == 812.5
        temp.write_text("hot\n")
        with pytest.raises(BadReply):
            await device.read()
        temp.unlink()
        with pytest.raises(LinkLost):
            await device.read()
        with pytest.raises(NotSupported):
            await device.write_setpoint(500.0)


def test_probe_reads_it_through_the_kiln_file(file_kind: None, kiln_file: Callable[..., Path],
                                             capsys: pytest.CaptureFixture[str]) -> None:
    temp = kiln_file("812500\n", "temp")
    kiln = kiln_file('name = "Bench"\nmax = 1100\n[device]\nkind = "file"\npath = "temp"\n'
                     "poll = 0.1\n")
    assert main(["probe", "--kiln", str(kiln), "--count", "2", "--json"]) == 0
    lines = [json.loads(line) for line in capsys.readouterr().out.splitlines() if line]
    assert [line["chamber"] for line in lines] == [812.5, 812.5]  # °C, as probe prints them
    assert temp.exists()
