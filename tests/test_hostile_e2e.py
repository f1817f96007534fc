"""Issue 20 end to end: hostile words and remote commands reach a real running engine.

- Invalid UTF-8 in a note on the command line (bytes given to a real `tuikiln note`
  process), and the same bytes raw on the control socket: the engine survives and the note
  is stored, sanitised, in the real run log.
- A remote `ack` published with a real client (mosquitto_pub) to a real mosquitto while a
  run holds safe after a restart (kill -9, then `tuikiln run --resume`): the run does not
  heat again; a local `tuikiln resume` does.

The rules are tuikiln's own (remote commands only make things safer: tuikiln/alerts/remote.py;
all user text is made storable: tuikiln/plaintext.py); no published source applies.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
from pathlib import Path

from tests.test_alerts_engine import BASE, PUB, kiln_file, watcher  # noqa: F401 - a fixture
from tests.waiting import wait_until
from tuikiln import control
from tuikiln.engine import states as st
from tuikiln.runlog import RunLog

ROOT = Path(__file__).resolve().parent.parent
LONG = """
name = "Long soak"
units = "C"
[[step]]
ramp = "600/h"
to = 300
[[step]]
hold = "10h"
"""


def tuikiln(*args: str | bytes, data: Path, **kw) -> subprocess.CompletedProcess:
    env = dict(os.environ, TUIKILN_DATA=str(data))
    argv = [os.fsencode(a) for a in (sys.executable, "-m", "tuikiln", *args)]
    return subprocess.run(argv, capture_output=True, env=env, timeout=60, cwd=ROOT, **kw)


def status(data: Path) -> dict | None:
    done = tuikiln("status", "--json", data=data)
    return json.loads(done.stdout) if done.returncode == 0 else None


def test_invalid_bytes_in_a_note_reach_a_running_engine_sanitised(tmp_path):
    data = tmp_path / "data"
    kiln = tmp_path / "kiln.toml"
    kiln.write_text('name = "Note oven"\nunits = "C"\nmax = 1100\n[device]\nkind = "sim"\n')
    profile = tmp_path / "long.toml"
    profile.write_text(LONG)
    started = tuikiln("run", str(profile), "--kiln", str(kiln), "--speed", "20",
                      "--no-screen", data=data)
    assert started.returncode == 0, started.stderr
    try:
        # Not UTF-8: a lone continuation byte, a surrogate's encoding, an escape sequence.
        words = b"door \xff\xfe open \xed\xa0\x80 \x1b[2J end"
        noted = tuikiln("note", words, data=data)
        assert noted.returncode == 0, noted.stderr
        assert b"Traceback" not in noted.stderr
        # The same bytes raw on the socket (not JSON: refused in one line), then as JSON with
        # a lone surrogate and an escape code escaped (valid JSON: taken, then sanitised).
        [active] = control.active_runs(data)
        with socket.socket(socket.AF_UNIX) as sock:
            sock.connect(str(active.socket))
            sock.settimeout(10)
            replies = sock.makefile("rb")
            sock.sendall(b'{"cmd": "note", "arg": "raw ' + words + b'"}\n')
            refused = json.loads(replies.readline())
            sock.sendall(b'{"cmd": "note", "arg": "raw door \\udcff open \\u001b[2J"}\n')
            taken = json.loads(replies.readline())
        assert not refused["ok"] and "JSON object" in refused["error"], refused
        assert taken["ok"], taken
        state = status(data)
        assert state is not None and state["state"] == st.RUN_RUNNING
        assert tuikiln("abort", data=data).returncode == 0
        wait_until(lambda: not control.active_runs(data), 30, "the aborted run to end")
    finally:
        for run in control.active_runs(data):
            os.kill(run.pid, signal.SIGKILL)
    log = RunLog.in_folder(data)
    run = log.latest_run()
    assert run is not None and run.outcome == st.ABORTED  # the engine finished its run
    notes = [e["message"] for e in log.events(run.id) if e["kind"] == "note"]
    assert notes, "the note from the command line was not stored"
    for message in notes:
        message.encode("utf-8")  # storable: no lone surrogates left
        assert "\x1b" not in message
    assert any("door" in m and "\ufffd" in m and "end" in m and "raw" not in m
               for m in notes), notes  # from the command line
    assert any("raw door" in m and "\ufffd" in m for m in notes), notes  # the socket


def test_a_remote_ack_does_not_heat_a_run_held_after_a_restart(mosquitto, watcher,  # noqa: F811
                                                               tmp_path):
    data = tmp_path / "data"
    kiln = kiln_file(mosquitto, tmp_path, commands=True, on_restart="hold")
    # kiln_file puts on_restart under [mqtt]; the kiln's own key belongs at the top.
    text = kiln.read_text().replace('on_restart = "hold"\n', "")
    kiln.write_text('on_restart = "hold"\n' + text)
    profile = tmp_path / "long.toml"
    profile.write_text(LONG)
    first = subprocess.Popen(
        [sys.executable, "-m", "tuikiln", "--kiln", str(kiln), "--data", str(data), "run",
         str(profile), "--headless", "--speed", "120"],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=ROOT)
    second: subprocess.Popen | None = None
    try:
        wait_until(lambda: (status(data) or {}).get("step") == 1, 60, "the hold step")
        os.kill(first.pid, signal.SIGKILL)  # the engine dies mid-run
        first.wait(10)
        second = subprocess.Popen(
            [sys.executable, "-m", "tuikiln", "--kiln", str(kiln), "--data", str(data), "run",
             "--resume", "--headless", "--speed", "20"],
            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=ROOT)
        watcher.wait_for(lambda line: '"operator-needed"' in line, 60,
                         "the resumed engine to ask for the operator")
        held = wait_until(lambda: status(data), 20, "the resumed engine's status")
        assert held["setpoint_c"] is None or held["setpoint_c"] <= 25.0, held

        def publish(payload: dict) -> None:
            subprocess.run([PUB, "-h", mosquitto.host, "-p", str(mosquitto.port), "-u",
                            "watcher", "-P", mosquitto.users["watcher"], "-q", "1",
                            "-t", f"{BASE}/command", "-m", json.dumps(payload)],
                           check=True, timeout=10)

        refusals = sum('"command-refused"' in line for line in watcher.lines())
        publish({"command": "ack"})
        watcher.wait_for(lambda _: sum('"command-refused"' in line
                                       for line in watcher.lines()) > refusals, 20,
                         "the engine to refuse the remote ack")
        still = status(data)
        assert still is not None
        assert still["setpoint_c"] is None or still["setpoint_c"] <= 25.0, still
        assert not any(e["kind"] == "command" and e["detail"].get("source") == "mqtt"
                       for e in watcher.events())
        # A person at the machine carries on: heat again.
        resumed = tuikiln("resume", data=data)
        assert resumed.returncode == 0, resumed.stderr
        heating = wait_until(lambda: (s := status(data)) and (s.get("setpoint_c") or 0) > 25.0
                             and s, 30, "heat after the local resume")
        assert heating["setpoint_c"] > 25.0
        assert tuikiln("abort", data=data).returncode == 0
        assert second.wait(30) == 2  # aborted
    finally:
        for process in (first, second):
            if process is not None and process.poll() is None:
                process.kill()
                process.wait(5)
