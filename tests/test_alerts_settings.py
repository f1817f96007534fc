"""The kiln file's [mqtt] and [[hook]] checkers, and the remote command reader."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from tuikiln import events as ev
from tuikiln.alerts.remote import ALLOWED_COMMANDS, Refusal, RemoteCommand, parse_command
from tuikiln.alerts.settings import (
    check_hooks,
    check_mqtt_settings,
    kiln_id,
    read_password,
)


def problems_of(table: dict, tmp_path: Path, name: str = "Bench Oven") -> dict[tuple, str]:
    settings, problems = check_mqtt_settings(table, name, str(tmp_path))
    assert (settings is None) == bool(problems)
    return dict(problems)


def test_defaults_and_the_id_derived_from_the_kiln_name(tmp_path: Path) -> None:
    settings, problems = check_mqtt_settings({"host": "broker.lan"}, "Bench Oven #2",
                                             str(tmp_path))
    assert problems == [] and settings is not None
    assert (settings.port, settings.prefix, settings.id) == (1883, "tuikiln", "bench-oven-2")
    assert (settings.readings, settings.discovery, settings.commands) == (True, False, False)
    assert settings.topic("status") == "tuikiln/bench-oven-2/status"
    assert kiln_id("  Öfen / Ost  ") == "fen-ost" and kiln_id("***") == "kiln"


def test_tls_changes_the_default_port_and_paths_are_relative_to_the_kiln_file(
    tmp_path: Path,
) -> None:
    (tmp_path / "ca.crt").write_text("not checked here\n")
    settings, problems = check_mqtt_settings({"host": "h", "tls": "ca.crt"}, "k", str(tmp_path))
    assert problems == [] and settings is not None
    assert settings.port == 8883  # the registered port for MQTT over TLS (IANA), from memory
    assert settings.tls == str(tmp_path / "ca.crt")


@pytest.mark.parametrize("key", ["password", "Password", "token"])
def test_a_password_in_the_kiln_file_is_refused(tmp_path: Path, key: str) -> None:
    problems = problems_of({"host": "h", "username": "kiln", key: "hunter2"}, tmp_path)
    message = problems[("mqtt", key)]
    assert "run log" in message and "password_file" in message
    assert "hunter2" not in message


def test_unknown_keys_get_a_suggestion(tmp_path: Path) -> None:
    problems = problems_of({"host": "h", "prot": 1883, "usrname": "k"}, tmp_path)
    assert 'did you mean "port"' in problems[("mqtt", "prot")]
    assert 'did you mean "username"' in problems[("mqtt", "usrname")]


def test_commands_need_a_login(tmp_path: Path) -> None:
    problems = problems_of({"host": "h", "commands": True}, tmp_path)
    assert "authenticated" in problems[("mqtt", "commands")]


def test_bad_values_each_get_a_plain_message(tmp_path: Path) -> None:
    problems = problems_of({
        "port": 70000, "readings": "yes", "id": "Bench Oven", "prefix": "a/#",
        "username": "kiln", "password_file": "missing.pass", "keepalive": 0,
        "tls_cert": "c.pem",
    }, tmp_path)
    assert problems[("mqtt", "host")].startswith('"host" is missing')
    assert "1 to 65535" in problems[("mqtt", "port")]
    assert "true or false" in problems[("mqtt", "readings")]
    assert 'try "bench-oven"' in problems[("mqtt", "id")]
    assert '"#"' in problems[("mqtt", "prefix")]
    assert "no such file" in problems[("mqtt", "password_file")]
    assert "2 to 3600" in problems[("mqtt", "keepalive")]
    assert '"tls_key" is missing' in problems[("mqtt", "tls_key")]
    assert problems_of("not a table", tmp_path)  # type: ignore[arg-type]


def test_the_password_comes_from_its_file_or_the_environment(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    (tmp_path / "p").write_text("s3cret with space\n")
    (tmp_path / "p").chmod(0o600)
    settings, _ = check_mqtt_settings({"host": "h", "username": "u", "password_file": "p"},
                                      "k", str(tmp_path))
    assert settings is not None and read_password(settings) == "s3cret with space"
    assert "s3cret" not in repr(settings)
    monkeypatch.setenv("MY_MQTT_PW", "from-env")
    settings, _ = check_mqtt_settings({"host": "h", "username": "u", "password_env": "MY_MQTT_PW"},
                                      "k", str(tmp_path))
    assert settings is not None and read_password(settings) == "from-env"


def test_hooks_are_checked_with_key_paths(tmp_path: Path) -> None:
    hooks, problems = check_hooks([
        {"on": ["alarm", "end", ev.NOTE], "run": ["true", "{message}"], "timeout": "2m"},
        {"on": ["alarms"], "run": "curl -d {message} https://x", "wait": 3},
        {"on": "operator", "run": ["no-such-program-here", "{mesage}", "{ lone"]},
        {"run": ["true"], "timeout": "soon"},
        "not a table",
    ], str(tmp_path))
    found = dict(problems)
    assert len(hooks) == 1
    assert hooks[0].on == {ev.ALARM_RAISED, ev.SAFE_STATE, ev.RUN_END, ev.NOTE}
    assert hooks[0].timeout == 120.0
    assert 'did you mean "alarm"' in found[("hook", 1, "on")]
    assert "never runs hooks through a shell" in found[("hook", 1, "run")]
    assert 'unknown key "wait"' in found[("hook", 1, "wait")]
    assert "no such program" in found[("hook", 2, "run", 0)]
    hook2_messages = [m for path, m in problems if path == ("hook", 2, "run", 1)]
    assert 'did you mean "message"' in hook2_messages[0]
    assert "lone" in dict(problems)[("hook", 2, "run", 2)]
    assert '"on" is missing' in found[("hook", 3, "on")]
    assert "duration" in found[("hook", 3, "timeout")]
    assert ("hook", 4) in found
    assert check_hooks({"on": "all"}, str(tmp_path))[1]  # a table, not [[hook]]


def test_remote_commands_allow_list() -> None:
    assert set(ALLOWED_COMMANDS) == {"ack", "pause", "abort", "note"}
    assert parse_command(b'{"command": "ABORT", "reason": "smoke"}') == \
        RemoteCommand("abort", {"reason": "smoke"})
    assert parse_command('{"command": "ack", "alarm": "over-target"}') == \
        RemoteCommand("ack", {"alarm": "over-target"})
    for payload in ('{"command": "resume"}', '{"command": "skip"}', '{"command": "start"}',
                    '{"command": "setpoint", "value": 900}'):
        refusal = parse_command(payload)
        assert isinstance(refusal, Refusal) and "add heat" in refusal.reason
    for payload in (b"", b"abort", b"null", b'{"command": 3}', b'{"command": "pause", "x": "1"}',
                    b'{"command": "note", "text": 5}', json.dumps({"command": "note",
                                                                  "text": "a" * 4100}).encode()):
        assert isinstance(parse_command(payload), Refusal), payload
    assert isinstance(parse_command(b'{"command": "abort"}', retained=True), Refusal)
