"""The engine-UI contract (tuikiln/engine/states.py, engine/status.py): the names are StrEnums
that serialize exactly as the strings other programs read, the status object keeps its keys,
the stored step-state codes never move, and no module spells a contract string by hand.

The strings and codes are tuikiln's own public interface (MQTT, `--json`, the control socket,
run logs already on disk), so these checks hold the code against what was published before,
not against an outside source."""

from __future__ import annotations

import ast
import io
import json
import sqlite3
from pathlib import Path

import pytest

from tuikiln import events as ev
from tuikiln.alerts.fanout import TerminalSink
from tuikiln.drivers.fake import FirstOrderOven
from tuikiln.engine import states as st
from tuikiln.engine import status as status_module
from tuikiln.engine.rules import RunRules, TickInput
from tuikiln.engine.status import STATUS_KEYS, LastReading, RunFacts, build_status
from tuikiln.errors import FileProblems
from tuikiln.events import Event
from tuikiln.kiln import parse_kiln
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile

ROOT = Path(__file__).resolve().parent.parent

RAMP_HOLD_PAUSE = """
name = "contract"
units = "C"
[[step]]
ramp = "max"
to = 200
[[step]]
hold = "2m"
[[step]]
pause = "Quench now"
"""


def drive_to_the_pause() -> tuple[RunRules, float]:
    """The pure rules against a first-order oven until the pause waits for the person."""
    rules = RunRules(parse_profile(RAMP_HOLD_PAUSE, "c.toml"), Limits(), max_c=1000.0,
                     load_watch=None)
    oven = FirstOrderOven()
    t = 0.0
    while not rules.stepper.waiting_for_operator:
        decision = rules.tick(t, TickInput(oven.temperature_c, output_pct=oven.output_pct()))
        if decision.setpoint_c is not None:
            oven.setpoint_c = decision.setpoint_c
        oven.advance(1.0)
        t += 1.0
        assert t < 6 * 3600, "the oven never reached the pause"
    return rules, t


def test_the_status_keeps_its_keys_and_its_strings() -> None:
    rules, t = drive_to_the_pause()
    status = build_status(rules, RunFacts(run_id=7, kiln="bench", started=0.0, watch_only=False),
                          now=t, last=LastReading(chamber_c=200.0))
    # The documented keys (engine/status.py docstring), in order.
    keys_paragraph = (status_module.__doc__ or "").split("\n\n")[1]
    documented = [key.strip() for key in keys_paragraph.replace("\n", " ").split(",")]
    assert list(status) == list(STATUS_KEYS) == documented
    text = json.dumps(status)
    assert '"state": "waiting-for-you"' in text and '"step_state": "waiting-you"' in text
    back = json.loads(text)
    assert type(back["state"]) is str and back["state"] == st.RunState.WAITING
    assert back["step_state"] == st.StepState.WAITING_YOU
    assert back["step"] == 2 and back["step_kind"] == "pause"


def test_stored_step_state_codes_never_move() -> None:
    """Run logs on disk hold these integers: a new state is appended, never inserted."""
    assert st.STATE_CODE == {
        "starting": 0, "heating": 1, "heating-full": 2, "reaching": 3, "evening": 4,
        "holding": 5, "slipped": 6, "cooling": 7, "settling": 8, "coasting": 9,
        "waiting-you": 10, "done": 11, "watching": 12,
    }


@pytest.mark.parametrize("member", [st.StepState.WAITING_YOU, st.RunState.WAITING,
                                    st.Outcome.ENDED_AFTER_RESTART, st.RestartPolicy.HOLD,
                                    st.BellKind.OPERATOR_NEEDED])
def test_a_member_is_its_string_in_json_and_sqlite(member: str) -> None:
    plain = member.value
    assert json.dumps({member: member}) == json.dumps({plain: plain})
    with sqlite3.connect(":memory:") as conn:
        stored = conn.execute("SELECT ?", (member,)).fetchone()[0]
    assert type(stored) is str and stored == plain
    assert f"{member}" == str(member) == plain  # messages show the string, not the name
    assert {plain: 1}[member] == 1  # same hash: lookups by either work


def test_the_waiting_names_stay_apart() -> None:
    assert st.StepState.WAITING_YOU == "waiting-you"
    assert st.RunState.WAITING == "waiting-for-you"
    assert "waiting-for-you" not in tuple(st.StepState)


def test_on_restart_is_read_as_a_policy() -> None:
    kiln = parse_kiln('on_restart = "end"\n', "k.toml")
    assert kiln.on_restart is st.RestartPolicy.END
    assert parse_kiln("", "k.toml").on_restart is st.RestartPolicy.HOLD
    with pytest.raises(FileProblems) as caught:
        parse_kiln('on_restart = "later"\n', "k.toml")
    words = str(caught.value)
    assert "k.toml:1" in words and all(p in words for p in ("continue", "hold", "end"))


def test_the_bells_ring_for_their_kinds() -> None:
    assert st.SCREEN_BELL < st.TERMINAL_BELL
    for kind in st.BellKind:
        assert kind in vars(ev).values()  # each is an event kind the engine sends
    out = io.StringIO()
    sink = TerminalSink(out, bell=True, clock_format=lambda t: "t")
    for kind in (ev.SAFE_STATE, ev.NOTE, ev.OPERATOR_NEEDED):
        sink.event(Event(0.0, kind, kind))
    assert [line.startswith("\a") for line in out.getvalue().splitlines()] == [
        True, False, True]


# Names whose values are contract strings: comparing one with a literal spells the contract
# by hand (where "waiting-you" and "waiting-for-you" got mixed up). A `kind` or `severity`
# is an event's; the other names hold states, outcomes and restart policies.
STATE_VALUES = frozenset(m.value for enum in (st.StepState, st.RunState, st.Outcome,
                                              st.RestartPolicy) for m in enum)
CONTRACT_VALUES = {
    **{name: STATE_VALUES for name in ("state", "step_state", "status", "outcome", "policy",
                                       "on_restart", "run_state")},
    "kind": frozenset(ev.EventKind), "severity": frozenset(ev.Severity),
}


def _contract_name(node: ast.expr) -> str | None:
    """The contract name an expression reads (`x.state`, `state`, `d["state"]`,
    `d.get("state")`), or None."""
    name: object = None
    if isinstance(node, ast.Attribute):
        name = node.attr
    elif isinstance(node, ast.Name):
        name = node.id
    elif isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Constant):
        name = node.slice.value
    elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
          and node.func.attr == "get" and node.args and isinstance(node.args[0], ast.Constant)):
        name = node.args[0].value
    return name if isinstance(name, str) and name in CONTRACT_VALUES else None


def _literals(node: ast.expr) -> list[str]:
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return [node.value]
    if isinstance(node, ast.Tuple | ast.List | ast.Set):
        return [v for element in node.elts for v in _literals(element)]
    return []


def _event_severity(node: ast.Call) -> ast.expr | None:
    """The severity an `Event(...)` call is given: its fourth argument or `severity=`."""
    name = node.func.id if isinstance(node.func, ast.Name) else (
        node.func.attr if isinstance(node.func, ast.Attribute) else "")
    if name != "Event":
        return None
    if len(node.args) >= 4:
        return node.args[3]
    return next((k.value for k in node.keywords if k.arg == "severity"), None)


def hand_spelled(source: str) -> list[tuple[int, str]]:
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Call):
            given = _event_severity(node)
            if given is not None:
                found.extend((node.lineno, v) for v in _literals(given)
                             if v in CONTRACT_VALUES["severity"])
        if isinstance(node, ast.Compare):
            sides = [node.left, *node.comparators]
            for side in sides:
                name = _contract_name(side)
                if name is not None:
                    found.extend((node.lineno, v) for other in sides for v in _literals(other)
                                 if v in CONTRACT_VALUES[name])
    return found


def test_the_finder_sees_a_hand_spelled_state() -> None:
    assert hand_spelled('if status.get("step_state") == "waiting-you": pass') == [
        (1, "waiting-you")]
    assert hand_spelled('x = run.status in ("running", "unfinished")') == [
        (1, "running"), (1, "unfinished")]
    assert hand_spelled('if step.kind == "hold": pass') == []
    assert hand_spelled('if event["kind"] == "step-start": pass') == [(1, "step-start")]
    assert hand_spelled('e = Event(t, ev.NOTE, "words", "warning", {})') == [(1, "warning")]
    assert hand_spelled('e = Event(t, ev.NOTE, "words", severity="critical")') == [
        (1, "critical")]
    assert hand_spelled('e = Event(t, ev.NOTE, "words", Severity.INFO)') == []
    assert hand_spelled('if e.severity in ("warning", "critical"): pass') == [
        (1, "warning"), (1, "critical")]


def test_no_module_spells_a_contract_string_by_hand() -> None:
    wrong = []
    for path in sorted((ROOT / "tuikiln").rglob("*.py")):
        if (path.name == "states.py" and path.parent.name == "engine") or (
                path.name == "events.py" and path.parent.name == "tuikiln"):
            continue
        for line, value in hand_spelled(path.read_text(encoding="utf-8")):
            wrong.append(f"{path.relative_to(ROOT)}:{line}: {value!r}: use tuikiln.engine.states "
                         "or tuikiln.events")
    assert not wrong, "\n".join(wrong)


def _answering(folder: Path, answer: bytes) -> tuple[str, object]:
    """A Unix socket in a private folder that answers each request with `answer` (another
    program, or a broken one, on the run's socket)."""
    import os
    import socket
    import threading

    folder.mkdir(mode=0o700)
    path = folder / "run.sock"
    server = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    server.bind(str(path))
    os.chmod(path, 0o600)
    server.listen()

    def serve() -> None:
        while True:
            try:
                peer, _ = server.accept()
            except OSError:
                return
            with peer:
                peer.recv(65536)
                peer.sendall(answer)

    threading.Thread(target=serve, daemon=True).start()
    return str(path), server


@pytest.mark.parametrize("answer", [
    b'{"ok": true, "status": [1, 2, 3]}\n',
    b'{"ok": true, "status": {"state": "running"}}\n',  # keys missing
    b'{"ok": true, "status": "running"}\n',
    b'{"ok": true}\n',
    b'{"ok": false, "error": "no"}\n',
])
async def test_a_status_that_is_not_one_reads_as_none(tmp_path: Path, answer: bytes) -> None:
    """The screens' link to a run checks the status it is sent (every key of Status) and
    gives None for anything else: the screen shows no status rather than failing."""
    from tuikiln.ui.controllink import SocketControl

    path, server = _answering(tmp_path / "sock", answer)
    try:
        assert await SocketControl(path).status() is None
    finally:
        server.close()


async def test_a_whole_status_from_the_socket_reads_as_it_was_sent(tmp_path: Path) -> None:
    from tuikiln.ui.controllink import SocketControl

    rules, t = drive_to_the_pause()
    sent = json.loads(json.dumps(build_status(
        rules, RunFacts(run_id=3, kiln="bench", started=0.0, watch_only=False), now=t,
        last=LastReading(chamber_c=200.0))))
    path, server = _answering(tmp_path / "sock", json.dumps({"ok": True, "status": sent}
                                                               ).encode() + b"\n")
    try:
        got = await SocketControl(path).status()
    finally:
        server.close()
    assert got == sent and got["step_state"] == st.StepState.WAITING_YOU
