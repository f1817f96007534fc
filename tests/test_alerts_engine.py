"""The engine and MQTT together, against a real mosquitto: a real `tuikiln run` process on
the built-in simulator, watched by an independent `mosquitto_sub`."""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from tests.waiting import wait_until

if TYPE_CHECKING:
    from tests.mqtt_broker import Broker

ROOT = Path(__file__).resolve().parent.parent
SUB = shutil.which("mosquitto_sub")
PUB = shutil.which("mosquitto_pub")
BASE = "tuikiln/bench-oven"


def kiln_file(broker: Broker, folder: Path, **extra: object) -> Path:
    (folder / "mqtt.pass").write_text(broker.users["kiln"] + "\n")
    (folder / "mqtt.pass").chmod(0o600)  # a password file others can read is refused
    options = "".join(f"{key} = {json.dumps(value)}\n" for key, value in extra.items())
    path = folder / "kiln.toml"
    path.write_text(
        'name = "Bench oven"\nunits = "C"\n[device]\nkind = "sim"\n'
        f'[mqtt]\nhost = "{broker.host}"\nport = {broker.port}\nusername = "kiln"\n'
        f'password_file = "mqtt.pass"\nkeepalive = 5\n{options}'
    )
    return path


class Watcher:
    """mosquitto_sub as an independent subscriber, its lines collected in a file."""

    def __init__(self, broker: Broker, folder: Path) -> None:
        self.out = folder / "sub.txt"
        self.handle = self.out.open("w")
        self.process = subprocess.Popen(
            [SUB or "mosquitto_sub", "-h", broker.host, "-p", str(broker.port), "-u", "watcher",
             "-P", broker.users["watcher"], "-t", f"{BASE}/#", "-v", "-q", "1",
             "-i", "watcher-sub"],
            stdout=self.handle,
        )
        # mosquitto_sub itself gives no "subscribed" signal: the broker's log does
        wait_until(lambda: broker.subscribed("watcher-sub", f"{BASE}/#"), 20,
                   "the broker to have mosquitto_sub's subscription", every=0.02)

    def lines(self) -> list[str]:
        self.handle.flush()
        return self.out.read_text().splitlines()

    def wait_for(self, predicate, timeout: float, what: str) -> None:  # noqa: ANN001
        """Until a line mosquitto_sub wrote meets `predicate`; AssertionError after `timeout`."""
        try:
            wait_until(lambda: any(predicate(line) for line in self.lines()), timeout, what,
                       every=0.05)
        except AssertionError as exc:
            raise AssertionError(f"{exc}; last lines: {self.lines()[-5:]}") from None

    def events(self) -> list[dict]:
        return [json.loads(line.split(" ", 1)[1]) for line in self.lines()
                if line.startswith(f"{BASE}/event ")]

    def close(self) -> None:
        self.process.terminate()
        self.process.wait(5)
        self.handle.close()


def run_command(kiln: Path, data: Path, profile: str, *extra: str) -> list[str]:
    return [sys.executable, "-m", "tuikiln", "--kiln", str(kiln), "--data", str(data), "run",
            str(ROOT / "profiles" / profile), "--headless", *extra]


@pytest.fixture
def watcher(mosquitto: Broker, tmp_path: Path):  # noqa: ANN201
    if not SUB or not PUB:
        pytest.skip("mosquitto_sub/mosquitto_pub are not installed (Debian mosquitto-clients)")
    w = Watcher(mosquitto, tmp_path)
    yield w
    w.close()


def test_a_run_publishes_online_state_every_step_and_the_end(
    mosquitto: Broker, watcher: Watcher, tmp_path: Path
) -> None:
    kiln = kiln_file(mosquitto, tmp_path)
    done = subprocess.run(run_command(kiln, tmp_path / "data", "dry-run.toml", "--speed", "max",
                                      "--auto-continue"),
                          capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    watcher.wait_for(lambda line: line == f"{BASE}/status offline", 20,
                     "the engine's own goodbye (status offline)")
    lines = watcher.lines()
    assert f"{BASE}/status online" in lines
    states = [json.loads(line.split(" ", 1)[1]) for line in lines
              if line.startswith(f"{BASE}/state ")]
    assert states and states[-1]["profile"].startswith("Dry run")
    events = watcher.events()
    starts = [e["detail"].get("index") for e in events if e["kind"] == "step-start"]
    assert starts == [0, 1, 2, 3]  # every step of the dry run, in order
    ends = [e for e in events if e["kind"] == "run-end"]
    assert len(ends) == 1 and ends[0]["detail"].get("outcome") == "completed"
    assert lines[-1] == f"{BASE}/status offline"  # a clean exit says so itself


def test_kill_9_of_the_engine_makes_the_broker_say_offline(
    mosquitto: Broker, watcher: Watcher, tmp_path: Path
) -> None:
    kiln = kiln_file(mosquitto, tmp_path)
    engine = subprocess.Popen(run_command(kiln, tmp_path / "data", "temper-only.toml",
                                          "--speed", "30"),
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=ROOT)
    try:
        watcher.wait_for(lambda line: line.startswith(f"{BASE}/state "), 30,
                         "the engine's first state")
        os.kill(engine.pid, signal.SIGKILL)
        engine.wait(5)
        killed = time.monotonic()
        # The Last Will: the broker itself announces the engine is gone.
        watcher.wait_for(lambda line: line == f"{BASE}/status offline", 20,
                         "the broker's Last Will (status offline)")
        assert time.monotonic() - killed < 10
    finally:
        if engine.poll() is None:
            engine.kill()


def test_remote_abort_works_and_remote_resume_is_refused(
    mosquitto: Broker, watcher: Watcher, tmp_path: Path
) -> None:
    kiln = kiln_file(mosquitto, tmp_path, commands=True)
    engine = subprocess.Popen(run_command(kiln, tmp_path / "data", "temper-only.toml",
                                          "--speed", "30"),
                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=ROOT)

    def send(payload: dict) -> None:
        subprocess.run([PUB or "mosquitto_pub", "-h", mosquitto.host, "-p", str(mosquitto.port),
                        "-u", "watcher", "-P", mosquitto.users["watcher"], "-q", "1",
                        "-t", f"{BASE}/command", "-m", json.dumps(payload)],
                       check=True, timeout=10)

    try:
        watcher.wait_for(lambda line: line.startswith(f"{BASE}/state "), 30,
                         "the engine's first state")
        send({"command": "resume"})
        watcher.wait_for(lambda line: "command-refused" in line, 20,
                         "the engine to refuse the remote resume")
        send({"command": "abort", "reason": "test"})
        assert engine.wait(30) == 2  # documented: aborted
    finally:
        if engine.poll() is None:
            engine.kill()
    events = watcher.events()
    assert any(e["kind"] == "command-refused" and "resume" in json.dumps(e) for e in events)
    assert any(e["kind"] == "safe-state" for e in events)
    assert any(e["kind"] == "run-end" and e["detail"].get("outcome") == "aborted"
               for e in events)
