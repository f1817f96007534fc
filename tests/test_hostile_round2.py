"""Issue 20, round two of hostile input: remote commands that could add heat, text that
cannot be stored or would drive a terminal, a socket folder another user prepared, and
the fuzz crashes (huge numbers, tiny rates, broken databases) that must end in one line.

The rules checked are tuikiln's own (remote commands only make things safer: the
docstring of tuikiln/alerts/remote.py); no published source applies. Real SQLite files, the
real engine on drivers.fake's first-order oven, real subprocesses for the command line.
"""

from __future__ import annotations

import asyncio
import json
import stat

import pytest

from tests.test_engine_rules import drive, rules_for
from tests.test_recovery import HOLD, Sink, crashed_run, engine_for, in_hold_for
from tuikiln import events as ev
from tuikiln.drivers.fake import FirstOrderOven, ScriptedDevice
from tuikiln.engine import recovery
from tuikiln.engine import states as st
from tuikiln.plaintext import plain

# ---- remote commands never add heat -------------------------------------------------------


async def test_a_remote_ack_does_not_release_a_hold_after_a_restart(tmp_path):
    log, model, clock, _ = await crashed_run(tmp_path, HOLD, in_hold_for(60.0))
    answers: list[dict] = []
    held: list[float] = []

    class Remote(Sink):
        def reading(self, sample) -> None:
            engine = self.engine
            if not engine.held_for_restart:
                return
            held.append(sample["time"])
            if len(held) == 5:  # "mqtt" is the source tuikiln/alerts/mqtt.py passes
                answers.append(engine.command("ack", None, "mqtt"))
                answers.append(engine.command("ack", "you", "mqtt"))
                answers.append(engine.command("resume", None, "mqtt"))
            if len(held) == 20:
                answers.append(engine.command("abort", None, "mqtt"))

    info = recovery.find_unfinished(log, "Test oven")
    plan = recovery.plan_resume(log, info, "hold", now=clock.now())
    device = ScriptedDevice(model=model, clock=clock)
    sink = Remote()
    engine = engine_for(HOLD, device, log, sink, resume=plan)
    outcome = await engine.run()
    assert [a["ok"] for a in answers] == [False, False, False, True], answers
    assert outcome == st.ABORTED and len(held) >= 20
    # No setpoint reached the oven after the hold began: the remote words added no heat.
    assert not [t for t, _ in device.setpoint_writes if t >= held[0]]


async def test_a_local_ack_still_releases_the_hold(tmp_path):
    log, model, clock, _ = await crashed_run(tmp_path, HOLD, in_hold_for(60.0))
    box: dict = {}

    class Local(Sink):
        def reading(self, sample) -> None:
            if self.engine.held_for_restart and "answer" not in box:
                box["answer"] = self.engine.command("ack", None, "socket")

    info = recovery.find_unfinished(log, "Test oven")
    plan = recovery.plan_resume(log, info, "hold", now=clock.now())
    device = ScriptedDevice(model=model, clock=clock)
    engine = engine_for(HOLD, device, log, Local(), resume=plan)
    assert await engine.run() == st.COMPLETED and box["answer"]["ok"]


def test_a_remote_ack_does_not_answer_a_pause_step():
    rules = rules_for("""
units = "C"
[[step]]
pause = "Load the oven"
[[step]]
ramp = "max"
to = 300
""")
    oven = FirstOrderOven()
    t, _ = drive(rules, oven, 10)
    assert not rules.command(t, "ack", None, "mqtt").ok
    t, _ = drive(rules, oven, 10, t)
    assert rules.run_state == st.RUN_WAITING and rules.stepper.index == 0
    assert rules.command(t, "ack", None, "keys").ok
    drive(rules, oven, 2, t)
    assert rules.stepper.index == 1


# ---- text that cannot be encoded or would drive a terminal ---------------------------------


def test_plain_makes_any_text_encodable_and_printable():
    dirty = "a\ud800b\udcffc\x1b[31mred\x07\x9b2J\u202eevil\r\nnext\t"
    clean = plain(dirty)
    clean.encode("utf-8")  # would raise UnicodeEncodeError on a surrogate
    assert "\x1b" not in clean and "\x07" not in clean and "\x9b" not in clean
    assert "\u202e" not in clean and "\n" not in clean
    assert clean.startswith("a\ufffdb\ufffdc")
    assert "\n" in plain("one\ntwo", lines=True)
    assert len(plain("x" * 50, limit=10)) == 10


async def test_a_note_with_a_lone_surrogate_does_not_stop_the_engine(tmp_path):
    from tuikiln.runlog import RunLog

    log = RunLog.in_folder(tmp_path)
    sent: list[dict] = []

    class Noter(Sink):
        def reading(self, sample) -> None:
            if not sent:
                sent.append(self.engine.command("note", "door \ud800 open \x1b[2J", "socket"))
                sent.append(self.engine.command("abort", "bad \udcff bytes", "command"))

    device = ScriptedDevice(model=FirstOrderOven(tau_s=300.0), clock=None)
    engine = engine_for(HOLD, device, log, Noter())
    outcome = await engine.run()
    assert outcome == st.ABORTED and all(a["ok"] for a in sent)
    run = log.run(engine.run_id)
    assert run is not None and run.outcome == st.ABORTED  # the run was finished in the log
    notes = [e for e in log.events(engine.run_id) if e["kind"] == ev.NOTE]
    assert notes and "\ufffd" in notes[0]["message"] and "\x1b" not in notes[0]["message"]


# ---- the control socket against local attackers -------------------------------------------


class _Engine:
    """What ControlServer needs of an engine (command, status, listeners); no run behind."""

    def __init__(self) -> None:
        self.listeners: list = []
        self.commands: list = []

    def status(self) -> dict:
        return {"state": "running"}

    def command(self, name, arg=None, source="command") -> dict:
        self.commands.append((name, arg, source))
        return {"ok": True, "message": "done"}


async def test_a_socket_folder_open_to_others_is_refused(tmp_path):
    import os

    import pytest

    from tuikiln import control
    from tuikiln.errors import UserError

    folder = tmp_path / "shared"
    folder.mkdir()
    os.chmod(folder, 0o777)  # as another user would leave a folder made first in /tmp
    fake = folder / "x.sock"
    with pytest.raises(UserError, match="open to other users"):
        await asyncio.to_thread(control.request, str(fake), "status")
    # The server makes its own folder private; a folder it cannot make private is refused.
    server = control.ControlServer(_Engine(), tmp_path / "mine" / "k.sock")
    await server.start()
    assert stat.S_IMODE(os.stat(server.path.parent).st_mode) == 0o700
    answer = await asyncio.to_thread(control.request, str(server.path), "status")
    assert answer["ok"]
    await server.close()
    link = tmp_path / "link"
    link.symlink_to(folder)
    with pytest.raises(UserError, match="symbolic link"):
        await control.ControlServer(_Engine(), link / "k.sock").start()


async def test_idle_and_surplus_connections_are_closed(tmp_path, monkeypatch):
    from tuikiln import control

    # Long enough that the first connections are still open when the surplus arrive on a
    # loaded machine, short enough to keep the test quick.
    monkeypatch.setattr(control, "IDLE_S", 3.0)
    server = control.ControlServer(_Engine(), tmp_path / "c" / "k.sock")
    await server.start()
    opened = []
    try:
        for _ in range(control.MAX_CLIENTS + 8):
            opened.append(await asyncio.open_unix_connection(str(server.path)))
        answers = [json.loads(await asyncio.wait_for(r.readline(), 10.0)) for r, _ in opened]
        refused = [a for a in answers if "connections are open" in a.get("error", "")]
        idle = [a for a in answers if "idle" in a.get("error", "")]
        assert len(refused) == 8 and len(idle) == control.MAX_CLIENTS
        for reader, _ in opened:  # every one closed by the server (end of stream)
            assert await asyncio.wait_for(reader.read(), 10.0) == b""
        # and the server still serves
        answer = await asyncio.to_thread(control.request, str(server.path), "status")
        assert answer["ok"]
    finally:
        for _, writer in opened:
            writer.close()
        await server.close()


# ---- user text on the screen is plain text ------------------------------------------------

MARKUP_PROFILE = """
name = "[/x] [bold]not bold"
units = "C"
[[step]]
ramp = "600/h"
to = 300
[[step]]
pause = "[/b] load \\u001b[2J the [red]oven"
"""


async def test_the_live_screen_shows_markup_like_names_as_they_are(tmp_path):
    from tests.test_ui_fakes import ScriptedEngine, shown
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.screens.live import LiveScreen

    profile = tmp_path / "markup.toml"
    profile.write_text(MARKUP_PROFILE, encoding="utf-8")
    engine = ScriptedEngine(tmp_path, profile)
    engine.advance(60)
    engine.event("note", "Note: \x1b]0;pwned\x07remote [/y] words")
    app = TuikilnApp(lambda: LiveScreen(engine.link(), poll_s=0.1), units="C")
    async with app.run_test(size=(120, 30)) as pilot:
        # shown as written: a name read as markup would never show these words
        text = await shown(pilot, "[/x] [bold]not bold", "remote [/y] words")
        assert "[/x] [bold]not bold" in text  # shown as written, not read as markup
        assert "remote [/y] words" in text and "\x1b" not in text and "\x07" not in text


def test_the_terminal_sink_strips_escape_codes():
    import io

    from tuikiln.alerts.fanout import TerminalSink
    from tuikiln.events import Event

    out = io.StringIO()
    TerminalSink(out).event(Event(0.0, ev.NOTE, "Note: \x1b[2J\x1b]0;t\x07hi \ud800", "info", {}))
    shown = out.getvalue()
    assert "\x1b" not in shown and "\x07" not in shown and "hi" in shown
    shown.encode("utf-8")


# ---- fuzz finds: numbers at the edges give one line and exit 1 ----------------------------

HUGE = "9" * 400  # a TOML integer far beyond a float (OverflowError in float())


def tuikiln_cli(*args: str, cwd=None, env=None):
    import os
    import subprocess
    import sys

    run_env = {**os.environ, **(env or {})}
    return subprocess.run([sys.executable, "-m", "tuikiln", *args], capture_output=True,
                          text=True, timeout=120, cwd=cwd, env=run_env)


def one_line_error(proc, *words: str) -> str:
    assert proc.returncode != 0, proc.stdout
    assert "Traceback" not in proc.stderr, proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert lines, "no message"
    for word in words:
        assert word in proc.stderr, proc.stderr
    return proc.stderr


EDGE_PROFILES = {
    "huge-to": (f'[[step]]\nramp = "600/h"\nto = {HUGE}\n', ':5: step 1: "to"'),
    "huge-band": (f'[[step]]\nramp = "600/h"\nto = 300\n[[step]]\nhold = "10m"\nband = {HUGE}\n',
                  ':8: step 2: "band"'),
    "huge-limit": (f'[[step]]\nramp = "600/h"\nto = 300\n[limits]\nband = {HUGE}\n',
                   ':7: "band"'),
    "huge-hold-number": (f'[[step]]\nramp = "max"\nto = 300\n[[step]]\nhold = {HUGE}\n',
                         ':7: step 2: "hold"'),
    "hold-1e300": ('[[step]]\nramp = "max"\nto = 300\n[[step]]\nhold = 1e300\n',
                   ':7: step 2: "hold"'),
    "hold-a-century": ('[[step]]\nramp = "max"\nto = 300\n[[step]]\nhold = "876000h"\n',
                       ':7: step 2: "hold"'),
    "tiny-rate": ('[[step]]\nramp = "0.0000001/h"\nto = 300\n', ':4: step 1: "ramp"'),
    "rate-rounding-to-zero": (f'[[step]]\nramp = "0.{"0" * 330}1/min"\nto = 300\n',
                              ':4: step 1: "ramp"'),
}


@pytest.mark.parametrize("name", sorted(EDGE_PROFILES))
def test_edge_numbers_in_a_profile_give_file_and_line(tmp_path, name):
    body, where = EDGE_PROFILES[name]
    path = tmp_path / "p.toml"
    path.write_text(f'name = "edge"\nunits = "C"\n{body}', encoding="utf-8")
    one_line_error(tuikiln_cli("plan", str(path)), f"p.toml{where}")


@pytest.mark.parametrize("every", ["nan", "inf", "1e-320", "0", "-3"])
def test_plan_every_refuses_what_cannot_be_listed(tmp_path, every):
    path = tmp_path / "p.toml"
    path.write_text('name = "e"\nunits = "C"\n[[step]]\nramp = "600/h"\nto = 300\n',
                    encoding="utf-8")
    one_line_error(tuikiln_cli("plan", str(path), "--csv", f"--every={every}"), "--every")


def test_a_kiln_max_too_large_for_a_float_is_a_mistake(tmp_path):
    from tuikiln.errors import FileProblems
    from tuikiln.kiln import parse_kiln

    with pytest.raises(FileProblems, match='"max"'):
        parse_kiln(f'name = "k"\nmax = {HUGE}\n', "k.toml")


# ---- broken run logs and data folders: one line, exit 1 ------------------------------------


@pytest.fixture(scope="module")
def logged_run(tmp_path_factory):
    """A real run log with one short simulated run in it."""
    data = tmp_path_factory.mktemp("logged")
    profile = data / "p.toml"
    profile.write_text('name = "short"\nunits = "C"\n[[step]]\nramp = "max"\nto = 100\n'
                       '[[step]]\nhold = "2m"\n', encoding="utf-8")
    proc = tuikiln_cli("run", str(profile), "--headless", "--speed", "1000", "--data",
                       str(data / "d"))
    assert proc.returncode == 0, proc.stderr
    return data / "d"


def _damaged(source, target, keep_header: bool):
    import shutil

    shutil.copytree(source, target)
    db = target / "runs.sqlite"
    data = bytearray(db.read_bytes())
    start = 4096 if keep_header else 0
    for i in range(start, len(data), 7):
        data[i] = (data[i] * 31 + 7) & 255
    db.write_bytes(bytes(data))
    for extra in ("runs.sqlite-wal", "runs.sqlite-shm"):
        (target / extra).unlink(missing_ok=True)
    return target


COMMANDS_ON_A_LOG = [["runs"], ["replay", "1"], ["export", "1"], ["report", "1", "-o", "r.html"],
                     ["run", "--resume", "--headless"]]


@pytest.mark.parametrize("keep_header", [False, True], ids=["not-a-database", "malformed"])
@pytest.mark.parametrize("command", COMMANDS_ON_A_LOG, ids=lambda c: c[0])
def test_a_damaged_run_log_gives_one_line(logged_run, tmp_path, command, keep_header):
    data = _damaged(logged_run, tmp_path / "d", keep_header)
    err = one_line_error(tuikiln_cli(*command, "--data", str(data), cwd=tmp_path),
                         "runs.sqlite cannot be used")
    assert ("not a database" in err) != keep_header


def test_a_locked_run_log_gives_one_line(logged_run, tmp_path):
    import shutil
    import sqlite3

    data = tmp_path / "d"
    shutil.copytree(logged_run, data)
    holder = sqlite3.connect(data / "runs.sqlite", isolation_level=None)
    try:
        holder.execute("PRAGMA locking_mode=EXCLUSIVE")
        holder.execute("BEGIN EXCLUSIVE")
        holder.execute("INSERT INTO meta VALUES ('held', 'by a test')")
        one_line_error(tuikiln_cli("runs", "--data", str(data)), "database is locked")
    finally:
        holder.close()


def test_a_data_folder_that_cannot_be_made_gives_one_line(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder", encoding="utf-8")
    profile = tmp_path / "p.toml"
    profile.write_text('name = "x"\nunits = "C"\n[[step]]\nramp = "max"\nto = 100\n',
                       encoding="utf-8")
    one_line_error(tuikiln_cli("run", str(profile), "--headless", "--data",
                               str(blocker / "data")), "Not a directory")


def test_logs_and_the_run_log_are_private(tmp_path):
    import os

    from tuikiln import control
    from tuikiln.runlog import RunLog, open_private

    data = tmp_path / "new" / "data"
    log = RunLog.in_folder(data)
    log.close()
    assert stat.S_IMODE(os.stat(data).st_mode) == 0o700
    assert stat.S_IMODE(os.stat(data / "runs.sqlite").st_mode) == 0o600
    wal = data / "runs.sqlite-wal"
    if wal.exists():
        assert stat.S_IMODE(os.stat(wal).st_mode) == 0o600
    active = control.write_active(data, "Oven", {"pid": 1})
    assert stat.S_IMODE(os.stat(active).st_mode) == 0o600
    assert stat.S_IMODE(os.stat(active.parent).st_mode) == 0o700
    with open_private(data / "engine.log") as out:
        out.write(b"x")
    assert stat.S_IMODE(os.stat(data / "engine.log").st_mode) == 0o600


# ---- the MQTT password ------------------------------------------------------------------


def test_a_password_file_others_can_read_is_refused(tmp_path):
    from tuikiln.alerts.settings import check_mqtt_settings, read_password

    secret = tmp_path / "mqtt.pass"
    secret.write_text("hunter2-\xff\n", encoding="latin-1")  # not UTF-8 either
    secret.chmod(0o644)
    table = {"host": "h", "username": "u", "password_file": "mqtt.pass"}
    settings, problems = check_mqtt_settings(table, "k", str(tmp_path))
    words = dict(problems)[("mqtt", "password_file")]
    assert "other users" in words and "chmod 600" in words
    secret.chmod(0o600)
    settings, problems = check_mqtt_settings(table, "k", str(tmp_path))
    assert settings is not None and not problems
    with pytest.raises(OSError) as caught:
        read_password(settings)
    # The error names the file, never its bytes.
    assert "hunter2" not in str(caught.value) and "xff" not in str(caught.value)
    assert "0xff" not in str(caught.value) and caught.value.__context__ is None
    secret.chmod(0o640)  # loosened after the check: refused when connecting too
    with pytest.raises(PermissionError, match="other users"):
        read_password(settings)


async def test_hooks_do_not_inherit_the_mqtt_password(tmp_path, monkeypatch):
    import sys

    from tuikiln.alerts.hooks import HookRunner
    from tuikiln.alerts.settings import check_hooks
    from tuikiln.events import Event

    monkeypatch.setenv("TUIKILN_MQTT_PASSWORD", "default-secret")
    monkeypatch.setenv("MY_PW", "named-secret")
    monkeypatch.setenv("HARMLESS", "kept")
    out = tmp_path / "env.txt"
    script = tmp_path / "dump.py"
    script.write_text(f"import os\nopen({str(out)!r}, 'w').write(repr(dict(os.environ)))\n",
                      encoding="utf-8")
    hooks, problems = check_hooks([{"on": ["note"], "run": [sys.executable, str(script)]}],
                                  str(tmp_path))
    assert not problems, problems
    runner = HookRunner(hooks, kiln_name="k", secret_env=("MY_PW",))
    await runner.start()
    runner.event(Event(0.0, ev.NOTE, "Note: hi", "info", {"text": "hi"}))
    assert await runner.drain(30)
    await runner.stop()
    env = out.read_text(encoding="utf-8")
    assert "kept" in env and "default-secret" not in env and "named-secret" not in env


# ---- fuzz: edge numbers into profiles and plans; any words and payloads into the engine ----

from hypothesis import given  # noqa: E402
from hypothesis import strategies as hst  # noqa: E402

from tests.test_hostile_files import TALLY, fuzz, no_hang  # noqa: E402

_edge_numbers = hst.one_of(
    hst.integers(), hst.integers(min_value=10**300, max_value=10**400),
    hst.floats(allow_nan=False, allow_infinity=False),
    hst.sampled_from([0, -0.0, 5e-324, 1e-320, 1e-300, 1e300, 1.7e308, 2**63, -(2**63)]))
_edge_text = hst.one_of(
    hst.builds(lambda n, u: f"{n}{u}", hst.one_of(hst.integers(0, 10**30), hst.floats(0, 1e30)),
               hst.sampled_from(["s", "m", "h", "/h", "/min", "", "h30m"])),
    hst.sampled_from(["max", "free", "1e300s", "0.0000001/h", f"{'9' * 330}h", "0/h"]))


def _toml(value) -> str:
    import json as _json

    if isinstance(value, str):
        return _json.dumps(value)
    if isinstance(value, float):
        return repr(value).replace("e+", "e") if "e" in repr(value) else repr(value)
    return str(value)


@fuzz(200)
@given(rate=hst.one_of(_edge_text, _edge_numbers), to=_edge_numbers,
       hold=hst.one_of(_edge_text, _edge_numbers), band=_edge_numbers,
       limit=_edge_numbers, units=hst.sampled_from(["C", "F"]),
       every=hst.one_of(hst.none(), hst.floats(1e-3, 1e7)))
def test_edge_numbers_give_problems_or_a_plan_that_can_be_drawn(rate, to, hold, band, limit,
                                                                units, every):
    from tuikiln.errors import FileProblems
    from tuikiln.plan import plan_profile
    from tuikiln.profile import parse_profile

    TALLY["profile edge numbers"] += 1
    text = (f'name = "edge"\nunits = "{units}"\n[[step]]\nramp = {_toml(rate)}\n'
            f"to = {_toml(to)}\n[[step]]\nhold = {_toml(hold)}\nband = {_toml(band)}\n"
            f"[limits]\nband = {_toml(limit)}\n")
    with no_hang("parse and plan"):
        try:
            profile = parse_profile(text, "edge.toml", max_c=1200.0)
        except FileProblems as exc:
            assert exc.problems and all(p.file == "edge.toml" and p.line for p in exc.problems)
            return
        plan = plan_profile(profile)
        assert 0.0 <= plan.total_s < 1e12
        if every is not None and plan.total_s / every <= 100_000:
            times, temps = plan.sample(every)
            assert len(times) == len(temps) >= 1


_any_words = hst.one_of(hst.text(max_size=300),
                        hst.text(hst.characters(min_codepoint=0xD800, max_codepoint=0xDFFF),
                                 min_size=1, max_size=5),
                        hst.sampled_from(["\x1b[2J\x1b]0;x\x07", "[/x]", "\u202eevil", "\x00"]))


@pytest.fixture(scope="module")
def fuzz_recorder(tmp_path_factory):
    from tuikiln.runlog import RunLog

    log = RunLog.in_folder(tmp_path_factory.mktemp("fuzzlog"))
    recorder = log.start_run(kiln="k", profile="p", started=0.0)
    yield log, recorder
    recorder.conn.close()


@fuzz(200)
@given(name=hst.sampled_from(["note", "abort", "ack", "pause", "resume", "skip", "x"]),
       words=_any_words, source=hst.one_of(hst.sampled_from(["mqtt", "command"]), _any_words))
def test_any_words_in_any_command_are_logged(fuzz_recorder, name, words, source):
    TALLY["engine command words"] += 1
    log, recorder = fuzz_recorder
    rules = rules_for(RAMP_TO_PAUSE)
    result = rules.command(0.0, name, words, source)
    for event in result.events:
        event.message.encode("utf-8")  # storable and sendable
        assert "\x1b" not in event.message
        recorder.event(event)
    assert recorder.flush(force=True), recorder.trouble


RAMP_TO_PAUSE = """
units = "C"
[[step]]
pause = "Load the oven"
[[step]]
ramp = "max"
to = 300
"""


@fuzz(300)
@given(payload=hst.one_of(
    hst.binary(max_size=200),
    hst.builds(lambda c, k, v: json.dumps({"command": c, k: v}),
               hst.sampled_from(["ack", "ACK ", "pause", "abort", "note", "resume", "skip"]),
               hst.sampled_from(["alarm", "text", "reason"]), _any_words),
    hst.sampled_from([b'{"command": "ack"}', b'{"command": "ack", "alarm": "you"}',
                      b'{"command": "ack", "alarm": "pause"}'])))
def test_no_remote_command_moves_a_pause_step_on(payload):
    from tuikiln.alerts.remote import RemoteCommand, parse_command

    TALLY["remote commands vs heat"] += 1
    oven = FirstOrderOven()
    rules = rules_for(RAMP_TO_PAUSE)
    t, _ = drive(rules, oven, 5)
    parsed = parse_command(payload)
    if isinstance(parsed, RemoteCommand):
        arg = parsed.args.get("alarm") or parsed.args.get("text") or parsed.args.get("reason")
        rules.command(t, parsed.name, arg, "mqtt")
    drive(rules, oven, 5, t)
    if not rules.ended:  # an abort ends the run (heat off); nothing else may go on
        assert rules.stepper.index == 0


def test_a_locked_log_keeps_samples_and_writes_them_when_free(tmp_path):
    import sqlite3

    from tuikiln.runlog import RunLog

    log = RunLog.in_folder(tmp_path)
    recorder = log.start_run(kiln="k", profile="p", started=0.0)
    holder = sqlite3.connect(tmp_path / "runs.sqlite", isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")  # another program writing, holding the write lock
    for i in range(10):
        recorder.sample(float(i), 100.0, None, None, 100.0, 10.0, 0, 1, 0)
    assert not recorder.flush(force=True)
    assert recorder.trouble and "locked" in recorder.trouble
    holder.execute("ROLLBACK")
    holder.close()
    assert recorder.end("completed", 10.0)
    assert len(log.samples(recorder.run_id)["t"]) == 10
    recorder.close()
