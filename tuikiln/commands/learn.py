"""`tuikiln learn RUN [--json] [--save]`: what one logged run says about the oven.

RUN is a run id from `tuikiln runs` or "last", or a CSV log (as `tuikiln import` reads it)
with a column of the heater output in %. The run needs heating (the output high for a few
minutes) and a free cool (the heat off while the oven fell): an ordinary harden or temper
run that ends with the heat off will do. `--save` keeps the model for the kiln (its `name`)
in the data folder; every later `--save` refines it with the new run. `tuikiln plan` and the
live screens then use it for their times.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import Any

from tuikiln.errors import UserError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run", metavar="RUN", nargs="?", default="last",
                        help='a run id from `tuikiln runs`, "last" (default), or a CSV log')
    parser.add_argument("--json", dest="json_output", action="store_true", help="print JSON")
    parser.add_argument("--save", action="store_true",
                        help="keep the model for this kiln (a later --save refines it)")
    parser.add_argument("--tau-c", dest="tau_c", metavar="SECONDS", type=float, default=None,
                        help="SIMC closed-loop time constant (default: the dead time, "
                             "\"tight\" control; larger is smoother and slower)")
    csv = parser.add_argument_group("CSV logs")
    csv.add_argument("--time-column", metavar="NAME", help="header of the time column")
    csv.add_argument("--chamber-column", metavar="NAME", help="header of the chamber column")
    csv.add_argument("--output-column", metavar="NAME",
                     help='header of the heater output column, in %% (default: "output_pct", '
                          '"output", "out", "power" or "mv")')
    csv.add_argument("--units", type=str.upper, choices=("C", "F"), default=None,
                     help="the CSV's temperature unit (default: from the header, else C)")


def run(args: argparse.Namespace) -> int:
    from tuikiln.kiln import load_kiln
    from tuikiln.ovenmodel import ModelError, identify, refine
    from tuikiln.ovenmodel_store import model_path, save_model, saved_model
    from tuikiln.runlog import default_data_dir

    if args.tau_c is not None and not (math.isfinite(args.tau_c) and args.tau_c > 0):
        raise UserError("--tau-c must be a number of seconds above zero")
    kiln = load_kiln(args.kiln)
    source, samples, kiln_name = _samples(args)
    if args.kiln:
        kiln_name = kiln.name
    try:
        model = identify(samples["t"], samples["chamber_c"], samples.get("output_pct"))
    except ModelError as exc:
        raise UserError(f"{source}: {exc}") from None
    learned_alone = model
    data_dir = default_data_dir(args.data)
    saved_at: Path | None = None
    if args.save:
        earlier = saved_model(data_dir, kiln_name)
        if earlier is not None:
            model = refine(earlier, model)
        if model is earlier:
            print(f'{source} is in the saved model of "{kiln_name}" already: not added again',
                  file=sys.stderr)
        saved_at = save_model(data_dir, kiln_name, model)
    pid = _pid(model, args.tau_c, _sample_s(samples))
    if args.json_output:
        out: dict[str, Any] = {
            "model": model.summary(),
            "pid": {key: pid.get(key) for key in ("kp", "ti_s", "td_s")},
            "pid_basis": {key: value for key, value in pid.items()
                          if key not in ("kp", "ti_s", "td_s")},
            "kiln": kiln_name,
            "source": source,
            "saved": str(saved_at) if saved_at else None,
            "this_run": learned_alone.summary() if model is not learned_alone else None,
        }
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    units = kiln.units
    sys.stdout.write(describe(model, pid, source, units))
    if saved_at is not None:
        print(f'Saved for "{kiln_name}" in {saved_at}'
              + (f" (refined: {model.runs} runs)" if model.runs > 1 else ""))
    else:
        print(f'Not saved: add --save to keep it for "{kiln_name}" '
              f"({model_path(data_dir, kiln_name)})")
    return 0


def _sample_s(samples: dict[str, Any]) -> float:
    import numpy as np

    t = np.asarray(samples["t"], dtype=float)
    return float(np.median(np.diff(t))) if t.size > 1 else 0.0


def _pid(model: Any, tau_c: float | None, sample_s: float) -> dict[str, Any]:
    from tuikiln.simc import simc_pid

    f = model.fopdt()
    try:
        s = simc_pid(f.gain_c_per_pct, f.tau_s, f.dead_time_s, tau_c_s=tau_c,
                     sample_s=sample_s)
    except ValueError as exc:
        return {"kp": None, "ti_s": None, "td_s": None, "note": str(exc)}
    return {"kp": round(s.kp, 3), "ti_s": round(s.ti_s, 1), "td_s": round(s.td_s, 1),
            "tau_c_s": round(s.tau_c_s, 1), "at_c": round(f.at_c, 1),
            "rule": "SIMC (Skogestad 2003), first order plus dead time",
            "units": "kp in % output per °C; times in seconds"}


def describe(model: Any, pid: dict[str, Any], source: str, units: str) -> str:
    """The model in plain words."""
    from tuikiln.units import format_duration, format_rate, format_temp

    f = model.fopdt()
    lines = [
        f"Learned from {source} ({format_duration(model.seconds)} of log, "
        f"{format_temp(model.valid_from_c, units)} to {format_temp(model.valid_to_c, units)}):",
        f"  heating at full output: {format_rate(model.heat_c_per_s, units)} from cold, "
        f"{format_rate(model.rate_c_per_s(f.at_c, f.at_c, 1.0), units)} at "
        f"{format_temp(f.at_c, units)} once the lining is hot",
        f"  highest it can hold: about {format_temp(model.top_c, units)} at full output",
        f"  to hold {format_temp(f.at_c, units)} it needs about {f.output_pct:.0f} % output "
        "once the lining has soaked through",
        f"  free cooling: {format_rate(model.loss_c_per_s(model.valid_to_c), units)} at "
        f"{format_temp(model.valid_to_c, units)}, "
        f"{format_rate(model.loss_c_per_s(model.room_c + 200.0), units)} at "
        f"{format_temp(model.room_c + 200.0, units)}",
        f"  the lining soaks up heat over about {format_duration(model.lining_tau_s)}; "
        f"the chamber's own time constant is about {format_duration(f.tau_s)}, "
        f"its dead time {model.dead_time_s:.0f} s",
        f"  fit: {model.rms_c_per_min:.2f} °C/min on the rate of change, "
        f"{model.sim_rms_c:.1f} °C over the whole run",
    ]
    if pid.get("kp") is not None:
        lines.append(f"PID by SIMC (Skogestad 2003) around {format_temp(f.at_c, units)}: "
                     f"kp {pid['kp']:g} % per °C, ti {pid['ti_s']:g} s, td {pid['td_s']:g} s "
                     f"(tau_c {pid['tau_c_s']:g} s)")
    else:
        lines.append(f"No PID settings: {pid.get('note')}")
    return "\n".join(lines) + "\n"


def _samples(args: argparse.Namespace) -> tuple[str, dict[str, Any], str]:
    """(what it is, samples, the kiln name the run was on)."""
    which = str(args.run)
    if which.lower().endswith((".csv", ".txt", ".tsv")) or Path(which).is_file():
        return _csv_samples(args, Path(which))
    from tuikiln.commands.replay import _find_run, open_run_log

    log = open_run_log(args.data, ", or a CSV log")
    try:
        info = _find_run(log, which)
        samples = log.samples(info.id)
    finally:
        log.close()
    return f"run {info.id}", samples, info.kiln


def _csv_samples(args: argparse.Namespace, path: Path) -> tuple[str, dict[str, Any], str]:
    from tuikiln.analysis.csvlog import CsvLayout, read_csv_log
    from tuikiln.kiln import load_kiln

    try:
        layout = CsvLayout(time_column=args.time_column, chamber_column=args.chamber_column,
                           output_column=args.output_column or "auto", units=args.units)
    except ValueError as exc:
        raise UserError(str(exc)) from None
    log = read_csv_log(path, layout)
    if log.output_pct is None:
        raise UserError(f"{path}: the log has no heater output column: give "
                        "--output-column NAME (the output in %)")
    samples = {"t": log.time_s, "chamber_c": log.chamber_c, "output_pct": log.output_pct}
    return str(path), samples, load_kiln(args.kiln).name
