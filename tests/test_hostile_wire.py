"""Hostile input from wires and networks: serial thermometer lines, MQTT command payloads,
control-socket messages, and secrets that must never reach a run log (property-based).

A line parser gives BadReply (or a reading); an MQTT payload gives a RemoteCommand on the
allow-list or a Refusal in words; the control socket answers every line with a JSON object
and keeps serving. Counts per parser go into the session summary (tests/test_hostile_files.py).
"""

from __future__ import annotations

import asyncio
import json
import math
import os
import socket
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from tests.test_hostile_files import TALLY, fuzz, no_hang
from tuikiln.drivers.errors import BadReply
from tuikiln.drivers.lines import ChannelSpec, LineParser, LineSettings, ParsedLine
from tuikiln.errors import FileProblems
from tuikiln.kiln import parse_kiln

# ---- serial thermometer lines -------------------------------------------------------------

CHANNELS = {
    "csv": (ChannelSpec("chamber", 0), ChannelSpec("load", "T2"),
            ChannelSpec("roof", 2, unit="mV", thermocouple="K", cold_junction_field=3)),
    "json": (ChannelSpec("chamber", "t1"), ChannelSpec("load", "t2", unit="F")),
    "keyvalue": (ChannelSpec("chamber", "T1"), ChannelSpec("load", "T2", unit="mV",
                                                             thermocouple="N",
                                                             cold_junction_c=23.0)),
    "regex": (ChannelSpec("chamber", "t"), ChannelSpec("load", "u")),
}
GOOD_LINES = {
    "csv": ["T1,T2,TC,CJ", "851.5,840.25,33.1,23.0", "OPEN,----,41.0,22"],
    "json": ['{"t1": 851.5, "t2": 1544.5}', '{"t1": "OPEN", "t2": null}'],
    "keyvalue": ["T1=851.5 T2=34.9", "T1:851.5;T2:ERR"],
    "regex": ["T1 851.5 T2 840.0", "T1 OL T2 ----"],
}


def _parser(fmt: str, header: bool) -> LineParser:
    return LineParser(LineSettings(port="/dev/null", format=fmt, channels=CHANNELS[fmt],
                                   header=header and fmt == "csv",
                                   pattern=r"T1\s+(?P<t>\S+)\s+T2\s+(?P<u>\S+)"))


_line_chars = st.characters(blacklist_categories=("Cs",))
_json_values = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(), st.floats(), st.text(max_size=10),
              st.sampled_from(["OPEN", "nan", "inf", "-1e999", "1e999", "9" * 400])),
    lambda inner: st.one_of(st.lists(inner, max_size=3),
                            st.dictionaries(st.sampled_from(["t1", "t2", "x"]), inner,
                                            max_size=3)),
    max_leaves=10,
)


@st.composite
def hostile_lines(draw: st.DrawFn, fmt: str) -> str:
    kind = draw(st.integers(0, 3))
    if kind == 0:
        return draw(st.text(_line_chars, max_size=200))
    if kind == 1:  # what the driver makes of raw bytes (decode with replacement, strip NULs)
        raw = draw(st.binary(max_size=200))
        return raw.decode("utf-8", errors="replace").strip().strip("\x00")
    if kind == 2 and fmt == "json":
        return json.dumps(draw(_json_values), allow_nan=True)
    line = draw(st.sampled_from(GOOD_LINES[fmt]))
    pos = draw(st.integers(0, len(line)))
    cut = draw(st.integers(0, 4))
    junk = draw(st.text(st.sampled_from(',;=: {}[]"\x00\ufffd.-e9'), max_size=5))
    return line[:pos] + junk + line[pos + cut:]


def _check_parsed(parsed: ParsedLine) -> None:
    values = [parsed.chamber_c, parsed.load_c, *parsed.channels.values()]
    assert all(v is None or math.isfinite(v) for v in values), values
    if parsed.chamber_c is None:
        assert parsed.sensor_fault  # a missing reading is never silent


@pytest.mark.parametrize("fmt", list(CHANNELS))
@fuzz(120)
@given(data=st.data())
def test_line_parser_gives_bad_reply_or_a_reading(fmt: str, data: st.DataObject) -> None:
    parser = _parser(fmt, header=data.draw(st.booleans()))
    for _ in range(3):  # a few lines in a row: a csv header may be learnt from the first
        line = data.draw(hostile_lines(fmt))
        TALLY[f"serial line ({fmt})"] += 1
        with no_hang("LineParser.parse"):
            try:
                parsed = parser.parse(line)
            except BadReply as exc:
                assert str(exc)
                continue
            except Exception as exc:  # the header marker is private; it is "not a reading"
                assert type(exc).__name__ == "_HeaderLine", repr(exc)
                continue
        _check_parsed(parsed)


def test_line_parser_carriage_return_in_csv_is_a_bad_reply() -> None:
    with pytest.raises(BadReply):
        _parser("csv", header=False).parse("85\r1.5,840,33,23")


def test_line_parser_deep_json_is_a_bad_reply() -> None:
    with pytest.raises(BadReply):
        _parser("json", header=False).parse("[" * 4000)


# ---- MQTT command payloads ----------------------------------------------------------------

remote = pytest.importorskip("tuikiln.alerts.remote", reason="no MQTT command parser yet")


@st.composite
def payloads(draw: st.DrawFn) -> bytes:
    kind = draw(st.integers(0, 3))
    if kind == 0:
        return draw(st.binary(max_size=300))
    if kind == 1:
        return draw(st.text(_line_chars, max_size=200)).encode("utf-8")
    command = draw(st.one_of(
        st.sampled_from([*remote.ALLOWED_COMMANDS, *remote.HEAT_ADDING, "ABORT", " Ack ",
                         "resume ", "SETPOINT", "", "shutdown"]),
        st.text(max_size=12), st.integers(), st.none(), st.lists(st.text(max_size=3))))
    body: dict[str, Any] = {"command": command}
    body.update(draw(st.dictionaries(st.sampled_from(["alarm", "reason", "text", "to", "arg",
                                                      "setpoint"]), _json_values, max_size=3)))
    if kind == 3 and draw(st.booleans()):
        body["text"] = "x" * draw(st.sampled_from([0, 999, 1000, 1001, 5000]))
    return json.dumps(body, allow_nan=True).encode("utf-8")


@fuzz(300)
@given(payload=payloads(), retained=st.booleans())
def test_mqtt_command_payloads_are_allowed_commands_or_refusals(payload: bytes,
                                                                retained: bool) -> None:
    TALLY["mqtt command payload"] += 1
    with no_hang("parse_command"):
        result = remote.parse_command(payload, retained=retained)
    if isinstance(result, remote.Refusal):
        assert result.reason and isinstance(result.name, str)
        return
    assert isinstance(result, remote.RemoteCommand)
    assert not retained  # a retained command would fire again at every reconnect
    assert result.name in remote.ALLOWED_COMMANDS  # safer or quieter only
    assert result.name not in remote.HEAT_ADDING
    assert len(payload) <= remote.MAX_PAYLOAD


def test_mqtt_deeply_nested_payload_is_refused() -> None:
    assert isinstance(remote.parse_command(b"[" * 4000), remote.Refusal)


# ---- control-socket messages --------------------------------------------------------------

control = pytest.importorskip("tuikiln.control", reason="no control socket yet")


class RecordingEngine:
    """Stands in for the run engine behind the socket: records commands, changes nothing.

    The real engine needs a device and a run log; what is tested here is the socket's
    request parsing, which only calls `command`, `status` and `listeners`."""

    def __init__(self) -> None:
        self.commands: list[tuple[str, str | None]] = []
        self.listeners: list[Any] = []

    def command(self, cmd: str, arg: str | None, source: str) -> dict[str, Any]:
        self.commands.append((cmd, arg))
        return {"ok": True, "message": f"{cmd} noted"}

    def status(self) -> dict[str, Any]:
        return {"state": "holding"}


class ServerThread:
    """A real ControlServer on a real Unix socket, in its own thread's event loop."""

    def __init__(self, path: Path) -> None:
        self.engine = RecordingEngine()
        self.server = control.ControlServer(self.engine, path)
        self.path = path
        self.loop = asyncio.new_event_loop()
        self.errors: list[dict[str, Any]] = []
        self.loop.set_exception_handler(lambda loop, context: self.errors.append(context))
        started = threading.Event()

        def run() -> None:
            asyncio.set_event_loop(self.loop)
            self.loop.run_until_complete(self.server.start())
            started.set()
            self.loop.run_forever()

        self.thread = threading.Thread(target=run, daemon=True)
        self.thread.start()
        assert started.wait(5)

    def exchange(self, line: bytes, timeout: float = 3.0) -> list[dict[str, Any]]:
        """Send one line; every answer line until the server stops talking."""
        with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as sock:
            sock.settimeout(timeout)
            sock.connect(str(self.path))
            sock.sendall(line + b"\n")
            sock.sendall(b'{"cmd": "status"}\n')  # still serving after the hostile line?
            buffer = b""
            answers: list[dict[str, Any]] = []
            while len(answers) < 2:
                try:
                    chunk = sock.recv(65536)
                except TimeoutError:
                    break
                if not chunk:
                    break
                buffer += chunk
                while b"\n" in buffer:
                    raw, buffer = buffer.split(b"\n", 1)
                    answers.append(json.loads(raw))
            return answers

    def stop(self) -> None:
        asyncio.run_coroutine_threadsafe(self.server.close(), self.loop).result(5)
        self.loop.call_soon_threadsafe(self.loop.stop)
        self.thread.join(5)
        self.loop.close()


@pytest.fixture(scope="module")
def control_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[ServerThread]:
    server = ServerThread(tmp_path_factory.mktemp("ctl") / "kiln.sock")
    yield server
    server.stop()


_cmds = st.one_of(st.sampled_from(["status", "pause", "resume", "skip", "abort", "ack", "note",
                                   "subscribe ", "STATUS", "shutdown", "", "setpoint"]),
                  st.text(max_size=10), st.integers(), st.none(), st.lists(st.integers()))


@st.composite
def control_lines(draw: st.DrawFn) -> bytes:
    kind = draw(st.integers(0, 2))
    if kind == 0:
        return draw(st.binary(max_size=200)).replace(b"\n", b" ")
    if kind == 1:
        return draw(st.text(_line_chars, max_size=100)).replace("\n", " ").encode("utf-8")
    body = {"cmd": draw(_cmds)}
    if draw(st.booleans()):
        body["arg"] = draw(_json_values)
    return json.dumps(body, allow_nan=True).encode("utf-8")


@fuzz(150)
@given(line=control_lines())
def test_control_socket_answers_every_line_and_keeps_serving(control_server: ServerThread,
                                                             line: bytes) -> None:
    TALLY["control-socket message"] += 1
    before = len(control_server.engine.commands)
    with no_hang("control socket exchange", 8.0):
        answers = control_server.exchange(line)
    assert answers, f"no answer to {line[:60]!r}"
    assert all(isinstance(a, dict) and "ok" in a for a in answers[:1])
    if answers[0].get("ok") is False:
        assert answers[0].get("error")
    assert answers[-1].get("status") == {"state": "holding"}, "stopped serving after it"
    for cmd, _ in control_server.engine.commands[before:]:
        assert cmd in ("pause", "resume", "skip", "abort", "ack", "note")
    assert not control_server.errors, control_server.errors[-1].get("message")


def test_control_socket_answers_a_deeply_nested_line(control_server: ServerThread) -> None:
    answers = control_server.exchange(b"[" * 20000)
    assert answers and answers[0].get("ok") is False


def test_control_socket_survives_an_overlong_line(control_server: ServerThread) -> None:
    with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as sock:
        sock.settimeout(3)
        sock.connect(str(control_server.path))
        try:
            sock.sendall(b"x" * (control.MAX_LINE + 10) + b"\n")
            answer = json.loads(sock.recv(65536).split(b"\n")[0])
            assert answer == {"ok": False, "error": "line too long"}
        except ConnectionResetError:
            pass  # the server hung up with our bytes unread: the answer may be lost (noted)
    assert control_server.exchange(b'{"cmd": "status"}')[0]["ok"] is True  # still serving


# ---- secrets ------------------------------------------------------------------------------

settings_module = pytest.importorskip("tuikiln.alerts.settings", reason="no [mqtt] settings")
SECRET = "s3cret-Tempering-Pw!"  # invented for the test


def test_mqtt_password_from_file_never_reaches_the_kiln_text(tmp_path: Path) -> None:
    password_file = tmp_path / "mqtt.pass"
    password_file.write_text(SECRET + "\n", encoding="utf-8")
    os.chmod(password_file, 0o600)
    kiln_file = tmp_path / "kiln.toml"
    kiln_file.write_text(
        'name = "Bench oven"\nunits = "C"\n[mqtt]\nhost = "127.0.0.1"\nusername = "kiln"\n'
        'password_file = "mqtt.pass"\n', encoding="utf-8")
    kiln = parse_kiln(kiln_file.read_text(encoding="utf-8"), str(kiln_file))
    assert kiln.mqtt is not None and kiln.mqtt.password_file == str(password_file)
    # .text is what goes into every run log (runlog's kiln_text column)
    assert SECRET not in kiln.text
    assert SECRET not in repr(kiln) and SECRET not in repr(kiln.mqtt)
    # the secret is read only when connecting
    assert settings_module.read_password(kiln.mqtt) == SECRET


@pytest.mark.parametrize("key", ["password", "Password", "passwd", "token"])
def test_password_in_the_kiln_file_is_refused_in_plain_words(key: str) -> None:
    text = (f'name = "Bench oven"\n[mqtt]\nhost = "127.0.0.1"\nusername = "kiln"\n'
            f'{key} = "{SECRET}"\n')
    with pytest.raises(FileProblems) as caught:
        parse_kiln(text, "kiln.toml")
    message = str(caught.value)
    assert message.startswith("kiln.toml:5: ")  # the file and the line of the password
    assert "not allowed" in message and "password_file" in message
    assert "Traceback" not in message
    assert SECRET not in message  # refusing it must not print it either
