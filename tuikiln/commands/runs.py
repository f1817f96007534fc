"""`tuikiln runs [--json]` lists the logged runs; `tuikiln export RUN --csv [-o FILE]` writes
a run's samples as CSV (temperatures in °C, time in seconds from the run's start and as an
absolute UTC time); `tuikiln export --help` lists the columns and flags (EXPORT_HELP)."""

from __future__ import annotations

import argparse
import csv
import json
import math
import sys
import time
from typing import Any

from tuikiln.errors import UserError

CSV_COLUMNS = ("t_s", "utc", "chamber_c", "load_c", "core_c", "setpoint_c", "output_pct",
               "step", "state", "flags")


def _flag_words() -> str:
    from tuikiln.engine import states as st

    words = ((st.FLAG_NO_READING, "no reading: the device did not answer"),
             (st.FLAG_SENSOR_FAULT, "sensor fault: the device answered without a temperature"),
             (st.FLAG_PAUSED, "paused by you"),
             (st.FLAG_WATCH_ONLY, "watch only: tuikiln did not drive the controller"),
             (st.FLAG_ALARM, "an alarm was active"),
             (st.FLAG_CORE_ESTIMATED, "core_c is the estimate (no load thermocouple)"),
             (st.FLAG_HEAT_OFF, "heat off (a free cool, a pause or the safe state)"))
    return "\n".join(f"  {bit:>3}  {text}" for bit, text in words)


EXPORT_HELP = """\
columns (one row per sample; an empty cell is a value that was not read):
  t_s         seconds from the start of the run
  utc         the same moment as an ISO 8601 UTC time (a simulated run: the simulation's clock)
  chamber_c   chamber thermocouple, °C
  load_c      load thermocouple, °C
  core_c      the load's core, °C (measured, or estimated: see flag 32)
  setpoint_c  the setpoint tuikiln asked for, °C
  output_pct  the controller's heater output, %
  step        the profile step, counted from 0
  state       the step's state (heating, reaching, evening, holding, slipped, ...)
  flags       the sum of these bits:
{flags}
`tuikiln import FILE --against PROFILE` reads the file back without options."""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    name = parser.prog.split()[-1]
    if name == "export":
        parser.add_argument("run_id", metavar="RUN", help='the run number (see `tuikiln runs`)'
                            ' or "last"')
        parser.add_argument("--csv", action="store_true", help="write CSV (the default)")
        parser.formatter_class = argparse.RawDescriptionHelpFormatter
        parser.epilog = EXPORT_HELP.format(flags=_flag_words())
        parser.add_argument("-o", "--output", metavar="FILE", default=None,
                            help="write to FILE (default, or -: the standard output)")
    else:
        parser.add_argument("--json", action="store_true", help="print the list as JSON")


def _log_path(args: argparse.Namespace) -> Any:
    from tuikiln.runlog import RUNLOG_NAME, default_data_dir

    return default_data_dir(args.data) / RUNLOG_NAME


def _open_log(args: argparse.Namespace) -> Any:
    from tuikiln.runlog import RunLog

    path = _log_path(args)
    if not path.exists():
        raise UserError(f"no runs logged yet (no {path})")
    return RunLog.reader(path)


def run(args: argparse.Namespace) -> int:
    if args.command == "runs" and not _log_path(args).exists():
        # Nothing logged yet is an answer, not a mistake: scripts get an empty list.
        print("[]" if args.json else "no runs logged yet")
        return 0
    log = _open_log(args)
    try:
        if args.command == "export":
            return _export(args, log)
        return _list(args, log)
    finally:
        log.close()


def _utc(t: float) -> str:
    """Engine-clock seconds as an ISO 8601 UTC time, to the tenth of a second."""
    from datetime import UTC, datetime

    return datetime.fromtimestamp(round(t, 1), UTC).isoformat(timespec="milliseconds"
                                                              ).replace("+00:00", "Z")


def _when(t: float | None) -> str:
    return "--" if t is None else time.strftime("%Y-%m-%d %H:%M", time.localtime(t))


def _length(run: Any) -> str:
    """How long the run lasted (or has lasted, while going), with its speed when simulated
    faster than real time ("2h15m ×60")."""
    from tuikiln.units import format_duration

    if run.ended is None:
        return "--"
    length = format_duration(max(0.0, run.ended - run.started))
    speed = str(run.speed or "").lstrip("x×")
    try:
        fast = float(speed) != 1.0
    except ValueError:  # "max": as fast as the simulator goes
        return f"{length} (sim {speed})" if speed else length
    return f"{length} ×{speed}" if fast else length


def with_end_marks(log: Any, runs: list[Any]) -> tuple[list[Any], set[int]]:
    """The runs, each one the database holds no end for but whose end mark does (the
    engine ended it while the disk was full: tuikiln/runlog.py, EndMark) with that end;
    and the ids of those. Reading only: the database gets the end from the next engine."""
    from dataclasses import replace

    out, marked = [], set()
    for r in runs:
        mark = log.end_mark(r.id) if not r.outcome else None
        if mark is not None:
            r = replace(r, outcome=mark["outcome"], ended=mark.get("ended"))
            marked.add(r.id)
        out.append(r)
    return out, marked


def _list(args: argparse.Namespace, log: Any) -> int:
    runs, marked = with_end_marks(log, log.runs())
    if args.json:
        print(json.dumps([{**r.summary(), "end_in_mark": r.id in marked} for r in runs],
                         indent=2))
        return 0
    if not runs:
        print("no runs logged yet")
        return 0
    # The start on the wall clock and the length on the run's own clock: a simulated run
    # sped up 60 times lasts its simulated hours, which ended minutes after it started.
    print(f"{'id':>4}  {'started':16}  {'length':>14}  {'outcome':16}  profile")
    for r in runs:
        star = "*" if r.id in marked else " "
        print(f"{r.id:>4}  {_when(r.wall_started or r.started):16}  {_length(r):>14}  "
              f"{r.status:16}{star} {r.profile}")
    if marked:
        print("* the end is in the run's end mark (the disk was full when the run ended); "
              "`tuikiln run --resume` writes it into the log")
    return 0


def _export(args: argparse.Namespace, log: Any) -> int:
    from tuikiln.engine.states import STEP_STATES

    if args.run_id == "last":
        info = log.latest_run()
    else:
        try:
            info = log.run(int(args.run_id))
        except ValueError:
            raise UserError(f'RUN must be a run number or "last", not "{args.run_id}"') from None
    if info is None:
        raise UserError(f"no run {args.run_id} in the log (see `tuikiln runs`)")
    samples = log.samples(info.id)
    to_file = args.output not in (None, "-")  # `-o -` is the standard output, as usual
    try:
        out = open(args.output, "w", newline="") if to_file else sys.stdout  # noqa: SIM115
    except OSError as exc:
        raise UserError(f"{args.output}: cannot write the samples: {exc.strerror or exc}"
                        ) from None
    try:
        writer = csv.writer(out)
        writer.writerow(CSV_COLUMNS)
        t = samples["t"] - info.started
        columns = [samples[c] for c in ("chamber_c", "load_c", "core_c", "setpoint_c",
                                         "output_pct")]
        for i in range(len(t)):
            row: list[Any] = [f"{t[i]:.1f}", _utc(float(samples["t"][i]))]
            row += ["" if math.isnan(c[i]) else f"{c[i]:.2f}" for c in columns]
            state = int(samples["state"][i])
            row += [int(samples["step"][i]),
                    STEP_STATES[state] if 0 <= state < len(STEP_STATES) else "",
                    int(samples["flags"][i])]
            writer.writerow(row)
    finally:
        if to_file:
            out.close()
    if to_file:
        print(f"Wrote {len(samples['t'])} samples of run {info.id} to {args.output}",
              file=sys.stderr)
    return 0
