"""How fast the simulated oven runs in process: simulated seconds per wall-clock second.

    python tests/bench/sim_speed.py [--quick] [--json]

Target: a 24 h schedule at 1 s steps in under 1 s of wall time (>= 100,000 simulated s per
wall s), so a whole harden-and-temper run can be replayed in a test or a benchmark. Figures
use process CPU time (best of a few runs), so other work on the machine matters less.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from dataclasses import replace
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from simulator import Fault, LoadConfig, SimConfig, SimulatedKiln  # noqa: E402

TARGET = 100_000.0


def _schedule(kiln: SimulatedKiln, seconds: float, step: float) -> None:
    """A harden-and-temper shape: ramp by setpoint writes, hold, cool, temper."""
    kiln.set_running(True)
    t = 0.0
    while t < seconds:
        hours = t / 3600.0
        if hours < 2.0:
            setpoint = min(650.0, 20.0 + 220.0 * hours * 1.5)
        elif hours < 3.5:
            setpoint = 955.0
        elif hours < 8.0:
            setpoint = 0.0
        else:
            setpoint = 205.0
        if int(t) % 10 == 0:
            kiln.set_setpoint(setpoint)
            kiln.read()
        kiln.advance(step)
        t += step


def _measure(config: SimConfig, seconds: float, step: float, repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        kiln = SimulatedKiln(config)
        start = time.process_time()
        _schedule(kiln, seconds, step)
        best = min(best, time.process_time() - start)
    return seconds / best


def run(quick: bool) -> dict[str, dict]:
    seconds = 6 * 3600.0 if quick else 24 * 3600.0
    repeats = 1 if quick else 3
    cases = {
        "sim_speed_empty_1s": (SimConfig(load=None), 1.0),
        "sim_speed_plate_1s": (SimConfig(), 1.0),
        "sim_speed_thick_plate_12_layers_1s": (
            SimConfig(load=replace(LoadConfig(), thickness_m=0.05, layers=12)), 1.0),
        "sim_speed_plate_with_faults_1s": (
            SimConfig(faults=(Fault("tc-drift", 3600.0, rate_c_per_h=-20.0),
                              Fault("door-open", 7200.0, 60.0))), 1.0),
    }
    figures: dict[str, dict] = {}
    for name, (config, step) in cases.items():
        rate = _measure(config, seconds, step, repeats)
        # The 12-layer plate is a stress case beyond the defaults: shown, not judged.
        judged = "12_layers" not in name
        figures[name] = {
            "value": round(rate),
            "unit": "simulated s per CPU s",
            "target": f">= {TARGET:,.0f}" if judged else "none (stress case)",
            "ok": (rate >= TARGET) if judged else None,
            "simulated_h": seconds / 3600.0,
        }
    return figures


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="6 simulated hours, one run each")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    args = parser.parse_args()
    figures = run(args.quick)
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        for name, f in figures.items():
            mark = {True: "ok", False: "SLOW", None: ""}[f["ok"]]
            print(f"{name:40s} {f['value']:>10,} {f['unit']}  (target {f['target']}) {mark}")
    return 0 if all(f["ok"] is not False for f in figures.values()) else 1


if __name__ == "__main__":
    raise SystemExit(main())
