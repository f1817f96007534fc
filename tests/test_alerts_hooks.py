"""Command hooks run real programs (small scripts written here) through the HookRunner."""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

from hypothesis import given
from hypothesis import strategies as st

from tests.waiting import alive, eventually
from tuikiln import events as ev
from tuikiln.alerts.hooks import HookRunner, build_argv
from tuikiln.alerts.settings import HookSpec, check_hooks
from tuikiln.events import Event

RECORDER = """#!{python}
import json, os, sys
with open(sys.argv[1], "a") as out:
    out.write(json.dumps({{"argv": sys.argv[2:], "message": os.environ.get("TUIKILN_MESSAGE"),
                          "event": json.loads(os.environ["TUIKILN_EVENT_JSON"])["kind"]}}) + "\\n")
"""


def script(tmp_path: Path, name: str, body: str) -> str:
    path = tmp_path / name
    path.write_text(body.format(python=sys.executable))
    path.chmod(0o755)
    return str(path)


def alarm(message: str = "Overshoot", **detail: object) -> Event:
    return Event(time=1_700_000_000.0, kind=ev.ALARM_RAISED, message=message,
                 severity="critical", detail=detail, run_id=12)


async def run_hooks(hooks: list[HookSpec], events: list[Event], **options: object) -> list[Event]:
    emitted: list[Event] = []
    runner = HookRunner(hooks, kiln_name="Bench Oven", emit=emitted.append, units="F",
                        **options)
    await runner.start()
    runner.reading({"chamber_c": 954.4444, "step": 3})
    for event in events:
        runner.event(event)
    assert await runner.drain(10)
    await runner.stop()
    return emitted


async def test_hook_gets_each_placeholder_as_one_argument(tmp_path: Path) -> None:
    recorder = script(tmp_path, "record.py", RECORDER)
    out = tmp_path / "argv.jsonl"
    hooks, problems = check_hooks([{
        "on": ["alarm"],
        "run": [recorder, str(out), "{kiln}", "{event}", "{message}", "--sev={severity}",
                "{temperature}", "run {run}, step {step}", "{{literal}}", "{message}"],
    }], str(tmp_path))
    assert problems == []
    nasty = 'He said "quench now"; rm -rf / $(touch pwned) \'x\'  two  spaces'
    emitted = await run_hooks(hooks, [alarm(nasty), alarm("-rf")])
    assert emitted == []
    first, second = [json.loads(line) for line in out.read_text().splitlines()]
    assert first["argv"] == ["Bench Oven", "alarm-raised", nasty, "--sev=critical", "1750 °F",
                             "run 12, step 4", "{literal}", nasty]
    assert first["message"] == nasty and first["event"] == "alarm-raised"
    # A value that would start an argument with "-" cannot pass for an option.
    assert second["argv"][2] == " -rf"
    assert not (tmp_path / "pwned").exists() and not Path("pwned").exists()


async def test_hooks_run_only_for_their_events(tmp_path: Path) -> None:
    recorder = script(tmp_path, "record.py", RECORDER)
    out = tmp_path / "argv.jsonl"
    hooks, problems = check_hooks([
        {"on": ["operator", "end"], "run": [recorder, str(out), "{event}"]},
        {"on": "all", "run": ["/bin/false"]},  # fails every time: must not loop on its failures
    ], str(tmp_path))
    assert problems == []
    events = [
        Event(1.0, ev.NOTE, "a note"),
        Event(2.0, ev.OPERATOR_NEEDED, "Quench now", "warning"),
        Event(3.0, ev.RUN_END, "Run completed", detail={"outcome": "completed"}),
    ]
    emitted = await run_hooks(hooks, events)
    assert [json.loads(line)["argv"] for line in out.read_text().splitlines()] == [
        ["operator-needed"], ["run-end"]]
    assert len(emitted) == 3  # one failure per event for /bin/false, and no more
    assert all(e.kind == ev.ALERT_FAILED and e.detail["channel"] == "hook" for e in emitted)
    assert "exit code 1" in emitted[0].message


async def test_a_hanging_hook_is_stopped_with_its_children(tmp_path: Path) -> None:
    pid_file = tmp_path / "child.pid"
    hanger = script(tmp_path, "hang.py", """#!{python}
import subprocess, sys, time
child = subprocess.Popen(["sleep", "60"])
open(sys.argv[1], "w").write(str(child.pid))
time.sleep(60)
""")
    hooks = [HookSpec(index=0, on=frozenset({ev.ALARM_RAISED}), run=(hanger, str(pid_file)),
                      timeout=0.5)]
    started = time.monotonic()
    emitted = await run_hooks(hooks, [alarm()])
    took = time.monotonic() - started
    assert [e.kind for e in emitted] == [ev.ALERT_FAILED]
    assert "did not finish within 0.5 s" in emitted[0].message
    child = int(pid_file.read_text())
    await eventually(lambda: not alive(child), 1.0, "the hook's child to be gone")
    assert took < 3.0


async def test_a_missing_program_and_a_failing_one_become_alert_failed(tmp_path: Path) -> None:
    failing = script(tmp_path, "fail.py", """#!{python}
import sys
print("push service said: 401 unauthorised", file=sys.stderr)
sys.exit(3)
""")
    hooks = [
        # Checked when the kiln file was read, removed since: found out when it runs.
        HookSpec(index=0, on=frozenset({ev.ALARM_RAISED}), run=(str(tmp_path / "gone"), "x")),
        HookSpec(index=1, on=frozenset({ev.ALARM_RAISED}), run=(failing,)),
    ]
    emitted = await run_hooks(hooks, [alarm()])
    messages = sorted(e.message for e in emitted)
    assert all(e.kind == ev.ALERT_FAILED and e.run_id == 12 for e in emitted)
    assert "no such program" in messages[0]
    assert "exit code 3: push service said: 401 unauthorised" in messages[1]


async def test_hooks_run_in_the_background_with_bounded_concurrency(tmp_path: Path) -> None:
    log = tmp_path / "spans.txt"
    slow = script(tmp_path, "slow.py", """#!{python}
import sys, time
start = time.monotonic()
time.sleep(0.2)
open(sys.argv[1], "a").write(f"{{start}} {{time.monotonic()}}\\n")
""")
    hooks = [HookSpec(index=n, on=frozenset({ev.NOTE}), run=(slow, str(log))) for n in range(3)]
    runner = HookRunner(hooks, kiln_name="k", concurrency=2)
    await runner.start()
    started = time.perf_counter()
    for n in range(2):
        runner.event(Event(float(n), ev.NOTE, f"note {n}"))  # 3 hooks each
    queued_in = time.perf_counter() - started
    assert await runner.drain(10)
    await runner.stop()
    spans = [tuple(map(float, line.split())) for line in log.read_text().splitlines()]
    assert len(spans) == 6
    most = max(sum(1 for a, b in spans if a <= t < b) for t, _ in spans)
    assert most <= 2
    assert queued_in < 0.05  # event() only queues


@given(st.text(max_size=200))
def test_placeholder_values_never_split_or_add_arguments(value: str) -> None:
    values = {"message": value, "kiln": value}
    argv = build_argv(["prog", "-m", "{message}", "at {kiln}!", "{{x}}"], values)
    clean = value.replace("\0", "")
    expected = (" " + clean) if clean.startswith("-") else clean
    assert len(argv) == 5
    assert argv[2] == expected
    assert argv[3] == f"at {clean}!"
    assert argv[4] == "{x}"
    assert os.path.basename(argv[0]) == "prog"
