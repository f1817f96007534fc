"""`tuikiln plan FILE`: the planned curve as a step table, JSON or CSV."""

from __future__ import annotations

import argparse
import csv
import json
import math
import sys

from tuikiln.commands.check import summary
from tuikiln.errors import UserError
from tuikiln.kiln import load_kiln
from tuikiln.plan import Plan, plan_profile
from tuikiln.profile import describe_step, load_profile
from tuikiln.units import (
    ROOM_C,
    UNITS,
    format_duration,
    from_c,
    parse_temperature,
    symbol,
)

MAX_CSV_ROWS = 10_000_000  # beyond this the CSV is a mistake (and would not fit in memory)
HELP = "show the planned curve of a profile (table, --json or --csv)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", metavar="FILE", help="profile file (TOML)")
    parser.add_argument("--from", dest="start", metavar="T",
                        help="starting temperature, e.g. 25C or 77F (default: room, 20 °C / 68 °F)")
    parser.add_argument("--units", type=str.upper, choices=UNITS,
                        help="show temperatures in C or F (default: the profile's)")
    shape = parser.add_mutually_exclusive_group()
    shape.add_argument("--json", action="store_true", help="one JSON object")
    shape.add_argument("--csv", action="store_true", help="the curve as time_s,setpoint rows")
    parser.add_argument("--every", type=float, metavar="SECONDS",
                        help="with --csv: one row every SECONDS instead of the curve's corners")


def run(args: argparse.Namespace) -> int:
    kiln = load_kiln(args.kiln)
    profile = load_profile(args.file, max_c=kiln.max_c)
    units = args.units or profile.units
    start_c = ROOM_C
    if args.start is not None:
        try:
            start_c = parse_temperature(args.start, default_units=profile.units)
        except ValueError as exc:
            raise UserError(f"--from: {exc}") from None
    plan = plan_profile(profile, start_c)
    if args.json:
        json.dump(plan_as_json(plan, units), sys.stdout, indent=2)
        print()
    elif args.csv:
        write_csv(plan, units, args.every)
    else:
        print_table(plan, units)
    return 0


def plan_as_json(plan: Plan, units: str) -> dict:
    def temp(c: float) -> float:
        return round(from_c(c, units), 3)

    return {
        "name": plan.profile.name,
        "units": units,
        "total_s": round(plan.total_s, 3),
        "peak": temp(plan.peak_c),
        "open_ended": plan.open_ended,
        "start": temp(plan.start_c),
        "steps": [
            {
                "index": s.index,
                "kind": s.kind,
                "start_s": round(s.start_s, 3),
                "end_s": round(s.end_s, 3),
                "from": temp(s.from_c),
                "to": temp(s.to_c),
                "open_ended": s.open_ended,
                "description": describe_step(s.step, units),
            }
            for s in plan.steps
        ],
    }


def write_csv(plan: Plan, units: str, every: float | None) -> None:
    if every is not None and not (math.isfinite(every) and every > 0):
        raise UserError("--every must be a number of seconds more than zero")
    if every is not None and plan.total_s / every > MAX_CSV_ROWS:
        raise UserError(f"--every {every:g} would give more than {MAX_CSV_ROWS:,} rows for "
                        f"a plan of {plan.total_s:.0f} s: choose a longer interval")
    if every:
        times, temps = plan.sample(every)
    else:
        times, temps = plan.times_s, plan.setpoints_c
    out = csv.writer(sys.stdout, lineterminator="\n")
    out.writerow(["time_s", f"setpoint_{units}"])
    for t, c in zip(times, temps, strict=True):
        out.writerow([f"{t:.1f}", f"{from_c(float(c), units):.2f}"])


def print_table(plan: Plan, units: str) -> None:
    print(f"{plan.profile.name}: {summary(plan)}")
    print(f"starts at {from_c(plan.start_c, units):.0f} {symbol(units)}; "
          "* = open-ended (its length is known only when it runs)")
    print(f"{'#':>3}  {'starts':>7}  {'ends':>7}  step")
    for s in plan.steps:
        mark = "*" if s.open_ended else " "
        print(f"{s.index + 1:>3}  {format_duration(s.start_s):>7}  {format_duration(s.end_s):>7}"
              f"{mark} {describe_step(s.step, units)}")
