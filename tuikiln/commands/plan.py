"""`tuikiln plan FILE`: the planned curve as a step table, JSON or CSV."""

from __future__ import annotations

import argparse
import csv
import json
import math
import sys
from dataclasses import dataclass
from typing import Any

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
    parser.add_argument("--model", metavar="FILE",
                        help="an oven model saved by `tuikiln learn --save` (default: the "
                             "kiln's saved model, if any)")


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
    forecast = _forecast(args, plan, kiln, units)
    if args.json:
        json.dump(plan_as_json(plan, units, forecast), sys.stdout, indent=2,
                  ensure_ascii=False)
        print()
    elif args.csv:
        write_csv(plan, units, args.every)
    else:
        print_table(plan, units, forecast)
    return 0


def _forecast(args: argparse.Namespace, plan: Plan, kiln: Any, units: str) -> Forecast:
    """The oven's prediction (`--model`, else the kiln's saved model), or the reason why
    there is none."""
    from pathlib import Path

    from tuikiln.ovenmodel import OvenModel
    from tuikiln.ovenmodel_plan import predict_on_kiln, temper_warnings
    from tuikiln.ovenmodel_store import model_path, read_model, saved_model
    from tuikiln.runlog import default_data_dir

    data_dir = default_data_dir(args.data)
    model: OvenModel | None
    if args.model:
        path = Path(args.model)
        model = read_model(path)
    else:
        path = model_path(data_dir, kiln.name)
        model = saved_model(data_dir, kiln.name)
    if model is None:
        return Forecast(None, None, temper_warnings(plan, None, None, units),
                        f'no oven model for "{kiln.name}": the times of "max" ramps, free '
                        "cools and the waits for the load to even out are unknown (counted as "
                        "nothing); learn the oven from a run with `tuikiln learn RUN --save`")
    prediction = predict_on_kiln(plan, model, kiln.alarms, units)
    return Forecast(prediction, str(path), list(prediction.warnings), "")


@dataclass
class Forecast:
    prediction: Any
    model_source: str | None
    warnings: list[Any]
    note: str


def plan_as_json(plan: Plan, units: str, forecast: Forecast | None = None) -> dict:
    def temp(c: float) -> float:
        return round(from_c(c, units), 3)

    def seconds(value: float | None) -> float | None:
        return None if value is None else round(value, 1)

    predicted = forecast.prediction if forecast is not None else None
    out: dict[str, Any] = {
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
    if forecast is None:
        return out
    out["predicted_total_s"] = seconds(predicted.total_s) if predicted else None
    for row, s in zip(out["steps"], plan.steps, strict=True):
        p = predicted.steps[s.index] if predicted else None
        row["predicted_start_s"] = seconds(p.start_s) if p else None
        row["predicted_end_s"] = seconds(p.end_s) if p else None
        if p and p.equalize_s:
            wait = p.equalize_s
            row["predicted_equalize_s"] = seconds(wait) if math.isfinite(wait) else None
    out["warnings"] = [{"step": w.step, "text": w.text} for w in forecast.warnings]
    out["model"] = forecast.model_source
    if forecast.note:
        out["model_note"] = forecast.note
    return out


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


def print_table(plan: Plan, units: str, forecast: Forecast | None = None) -> None:
    print(f"{plan.profile.name}: {summary(plan)}")
    predicted = forecast.prediction if forecast is not None else None
    if predicted is not None:
        total = predicted.total_s
        print("on this oven (learned model): about "
              + (format_duration(total) if total is not None else "never: see below"))
    print(f"starts at {from_c(plan.start_c, units):.0f} {symbol(units)}; "
          "* = open-ended (its length is known only when it runs)")
    more = f"  {'oven ends':>9}" if predicted is not None else ""
    print(f"{'#':>3}  {'starts':>7}  {'ends':>7} {more} step")
    for s in plan.steps:
        mark = "*" if s.open_ended else " "
        oven = wait = ""
        if predicted is not None:
            end = predicted.steps[s.index].end_s
            oven = f"  {format_duration(end) if end is not None else 'never':>9}"
            waited = predicted.steps[s.index].equalize_s
            if waited:
                # describe_step ends "once the load has evened out": say when
                wait = (f" (in about {format_duration(waited)})" if math.isfinite(waited)
                        else " (never, by the estimate)")
        print(f"{s.index + 1:>3}  {format_duration(s.start_s):>7}  {format_duration(s.end_s):>7}"
              f"{mark}{oven} {describe_step(s.step, units)}{wait}")
    if forecast is None:
        return
    for w in forecast.warnings:
        print(f"warning: step {w.step + 1}: {w.text}")
    if forecast.note:
        print(forecast.note)
