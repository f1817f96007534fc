"""`tuikiln pause | resume | skip | abort | ack [ALARM] | note TEXT | status [--json]`:
steer or watch the run going on, through its local control socket (tuikiln/control.py)."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from tuikiln.plaintext import plain
from tuikiln.units import format_duration, format_temp


def add_arguments(parser: argparse.ArgumentParser) -> None:
    name = parser.prog.split()[-1]
    if name == "ack":
        parser.add_argument("alarm", nargs="?", default=None, metavar="ALARM",
                            help="the alarm's code (default: everything waiting)")
    elif name == "note":
        parser.add_argument("text", nargs="+", metavar="TEXT", help="the note")
    elif name == "abort":
        parser.add_argument("reason", nargs="*", metavar="REASON", help="why (optional)")
    elif name == "status":
        parser.add_argument("--json", action="store_true", help="print the status object")


def _kiln_name(args: argparse.Namespace) -> str | None:
    if not args.kiln:
        return None
    from tuikiln.kiln import load_kiln

    return load_kiln(args.kiln).name


def run(args: argparse.Namespace) -> int:
    from tuikiln import control
    from tuikiln.runlog import default_data_dir

    data_dir = default_data_dir(args.data)
    active = control.pick_run(data_dir, _kiln_name(args))
    cmd = args.command
    if cmd == "status":
        answer = control.request(active.socket, "status")
        status = answer.get("status", {})
        if args.json:
            print(json.dumps(status, indent=2))
        else:
            print(status_words(status))
        return 0
    arg: str | None = None
    if cmd == "ack":
        arg = args.alarm
    elif cmd == "note":
        arg = " ".join(args.text)
    elif cmd == "abort":
        arg = " ".join(args.reason) or None
    if arg is not None:
        arg = plain(arg)  # invalid bytes in argv arrive as lone surrogates
    answer = control.request(active.socket, cmd, arg)
    if not answer.get("ok"):
        print(f"tuikiln: {plain(answer.get('message') or answer.get('error'))}",
              file=sys.stderr)
        return 1
    print(plain(answer.get("message", "done")))
    return 0


def status_words(status: dict[str, Any]) -> str:
    u = status.get("units", "C")
    lines = [f"Run {status.get('run')}: {status.get('profile')} on {status.get('kiln')} "
             f"({status.get('state')})"]
    step = status.get("step", 0) + 1
    lines.append(f"Step {step} of {status.get('step_count')}: {status.get('step_words')}")
    temps = [f"chamber {format_temp(status.get('chamber_c'), u)}"]
    if status.get("load_c") is not None:
        temps.append(f"load {format_temp(status.get('load_c'), u)}")
    elif status.get("core_c") is not None:
        temps.append(f"load (estimated) {format_temp(status.get('core_c'), u)}")
    temps.append(f"setpoint {format_temp(status.get('setpoint_c'), u)}")
    if status.get("output_pct") is not None:
        temps.append(f"output {status['output_pct']:.0f} %")
    lines.append(", ".join(temps))
    times = []
    for key, words in (("time_to_next_step_s", "next step in"),
                       ("time_to_operator_s", "you are needed in"),
                       ("time_to_end_s", "end in")):
        if status.get(key) is not None:
            times.append(f"{words} {format_duration(status[key])}")
    if times:
        lines.append("; ".join(times))
    for alarm in status.get("alarms", []):
        seen = " (acknowledged)" if alarm.get("acknowledged") else ""
        lines.append(f"{alarm['severity'].upper()} {alarm['code']}: {alarm['words']}{seen}")
    if status.get("watch_only"):
        lines.append("Watching only: tuikiln does not control this oven.")
    safe = status.get("safe_state")
    if isinstance(safe, dict):
        lines.append(f"CRITICAL {safe.get('words')} (still trying: "
                     f"{safe.get('attempts')} attempts in "
                     f"{format_duration(safe.get('since_s') or 0.0)}; `tuikiln abort` stops "
                     "the trying)")
    return "\n".join(lines)
