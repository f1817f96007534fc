"""`tuikiln probe` end to end: the simulator served by `tuikiln sim serve` (a separate
process, on a real pty and over TCP), read through the Modbus driver and the `sim` map."""

from __future__ import annotations

import importlib.util
import json
import os
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import pytest

from tests.simserve import ServedSim
from tests.test_drivers_maps import SIM_DRAFT

ROOT = Path(__file__).resolve().parents[1]
needs_sim_serve = pytest.mark.skipif(
    importlib.util.find_spec("tuikiln.commands.sim") is None,
    reason="tuikiln sim serve is not there yet (simulator helper)",
)


@pytest.fixture
def serve(served_sim: Callable[..., ServedSim]) -> Callable[..., str]:
    return lambda *where: served_sim(*where, "--speed", "max").where


def _kiln(tmp_path: Path, port: str) -> Path:
    shipped = ROOT / "drivers" / "maps" / "sim.toml"
    if shipped.exists():
        map_ref = "sim"
    else:  # the simulator helper ships sim.toml; until then its draft, in the same format
        (tmp_path / "sim.toml").write_text(SIM_DRAFT)
        map_ref = "sim.toml"
    kiln = tmp_path / "kiln.toml"
    kiln.write_text(f'name = "probe test"\nmax = 1100\n[device]\nkind = "modbus"\n'
                    f'port = "{port}"\nmap = "{map_ref}"\ntimeout = 0.5\n')
    return kiln


def _probe(kiln: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "tuikiln", "probe", "--kiln", str(kiln), *extra],
        capture_output=True, text=True, timeout=30, cwd=ROOT,
        env={**os.environ, "PYTHONWARNINGS": "ignore"})


@needs_sim_serve
@pytest.mark.parametrize("where", [("--pty",), ("--tcp", "0")])
def test_probe_reads_the_served_simulator(serve, tmp_path, where) -> None:
    port = serve(*where)
    assert port.startswith("/dev/") or port.startswith("tcp://127.0.0.1:")
    done = _probe(_kiln(tmp_path, port), "--count", "5", "--every", "0.05", "--json")
    assert done.returncode == 0, done.stderr
    records = [json.loads(line) for line in done.stdout.splitlines()]
    assert len(records) == 5
    for record in records:
        assert {"time", "chamber", "setpoint", "load", "output", "sensor_fault"} <= set(record)
        # the simulated oven starts at room temperature, 20 °C (simulator/config.py default)
        assert 15.0 < record["chamber"] < 30.0
        assert record["setpoint"] == 0.0 and record["sensor_fault"] is False


def test_probe_missing_port_lists_ports_and_exits_1(tmp_path) -> None:
    done = _probe(_kiln(tmp_path, str(tmp_path / "ttyGONE")), "--count", "1")
    assert done.returncode == 1
    assert "no serial port" in done.stderr and "try:" in done.stderr
    assert "Traceback" not in done.stderr


def test_probe_silent_device_says_what_to_check(tmp_path) -> None:
    master, slave = os.openpty()
    try:
        done = _probe(_kiln(tmp_path, os.ttyname(slave)), "--count", "1")
    finally:
        os.close(master)
        os.close(slave)
    assert done.returncode == 1
    assert "no answer" in done.stderr and "A/B" in done.stderr
    assert "Traceback" not in done.stderr


def test_probe_without_kiln_file_reads_the_simulator(tmp_path) -> None:
    env = {**os.environ, "XDG_CONFIG_HOME": str(tmp_path)}  # no user kiln file here
    done = subprocess.run(
        [sys.executable, "-m", "tuikiln", "probe", "--count", "2", "--every", "0.01"],
        capture_output=True, text=True, timeout=30, cwd=ROOT, env=env)
    assert done.returncode == 0, done.stderr
    assert len(done.stdout.splitlines()) == 2 and "chamber" in done.stdout
