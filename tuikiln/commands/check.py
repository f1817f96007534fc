"""`tuikiln check FILE...`: check profiles; one summary line per good file, every mistake."""

from __future__ import annotations

import argparse
import sys

from tuikiln.errors import FileProblems
from tuikiln.kiln import load_kiln
from tuikiln.plan import plan_profile
from tuikiln.profile import load_profile
from tuikiln.units import format_duration, format_temp


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("files", nargs="+", metavar="FILE", help="profile files (TOML)")


def summary(plan_obj) -> str:  # noqa: ANN001 - a Plan
    profile = plan_obj.profile
    steps = len(profile.steps)
    total = format_duration(plan_obj.total_s)
    more = " or more" if plan_obj.open_ended else ""
    peak = format_temp(plan_obj.peak_c, profile.units)
    return f"{steps} step{'s' if steps != 1 else ''}, {total}{more}, peak {peak}"


def run(args: argparse.Namespace) -> int:
    kiln = load_kiln(args.kiln)
    failed = False
    for path in args.files:
        try:
            profile = load_profile(path, max_c=kiln.max_c)
        except FileProblems as exc:
            failed = True
            for problem in exc.problems:
                print(problem, file=sys.stderr)
            continue
        print(f"{path}: ok: {profile.name}: {summary(plan_profile(profile))}")
    return 1 if failed else 0
