"""What learning the oven and predicting with it cost: seconds of wall time.

    python tests/bench/ovenmodel_fit.py [--quick] [--json]

Figures: identification of a 1 Hz log (heat, hold, free cool) of 8 h and 24 h (growth), one
`plan` prediction of a 24 h profile (and of the same with both holds equalized for a 20 mm
foil-wrapped load: the engine's load watch then runs along the trace), and one live ETA
(`LiveForecast.step_left_s` from a new temperature, as the status asks once a second while
a ramp or cool runs). Targets: a 24 h log learned in under 2 s (`tuikiln learn` answers at
once); a live ETA under 5 ms, so a 1 Hz status costs under 0.5 % of a core.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tuikiln.ovenmodel import identify  # noqa: E402
from tuikiln.ovenmodel_plan import LiveForecast, predict  # noqa: E402
from tuikiln.plan import plan_profile  # noqa: E402
from tuikiln.profile import parse_profile  # noqa: E402
from tuikiln.simulator import OvenConfig, SimConfig, SimulatedKiln  # noqa: E402

PROFILE = """
name = "bench: a long day"
units = "C"
[[step]]
ramp = "200/h"
to = 650
[[step]]
hold = "2h"
[[step]]
ramp = "max"
to = 950
[[step]]
hold = "1h"
[[step]]
cool = "50/h"
to = 500
[[step]]
cool = "free"
to = 100
"""
EQUALIZED = PROFILE.replace('hold = "2h"', 'hold = "2h"\nstart = "equalized"').replace(
    'hold = "1h"', 'hold = "1h"\nstart = "equalized"').replace(
    'units = "C"', 'units = "C"\n[load]\nmaterial = "AISI D2"\nthickness = "20 mm"\nwrap = "foil"')


def _log(hours: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    kiln = SimulatedKiln(SimConfig(oven=OvenConfig(heater_w=3000.0, chamber_litres=20.0,
                                                   chamber_heat_capacity_j_k=6000.0),
                                   load=None, seed=3))
    kiln.set_running(True)
    n = int(hours * 3600)
    t, temp, out = np.arange(n, dtype=float), np.empty(n), np.empty(n)
    for i in range(n):
        kiln.set_setpoint(850.0 if i < n * 0.4 else 0.0)
        r = kiln.read()
        temp[i], out[i] = r.chamber_c, r.output_pct
        kiln.advance(1.0)
    return t, temp, out


def _best(fn, repeats: int) -> float:  # noqa: ANN001
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - start)
    return best


def run(quick: bool) -> dict[str, dict]:
    repeats = 1 if quick else 3
    small, large = (4.0, 12.0) if quick else (8.0, 24.0)
    logs = {h: _log(h) for h in (small, large)}
    fit_small = _best(lambda: identify(*logs[small]), repeats)
    fit_large = _best(lambda: identify(*logs[large]), repeats)
    model = identify(*logs[large])
    profile = parse_profile(PROFILE)
    plan = plan_profile(profile)
    plan_s = _best(lambda: predict(plan, model, 8.0), repeats)
    plan_eq = plan_profile(parse_profile(EQUALIZED))
    plan_eq_s = _best(lambda: predict(plan_eq, model, 8.0), repeats)
    live = LiveForecast(profile, model, 8.0)
    # Each call from a new whole degree (the cache keeps one answer per degree): the mean.
    temps = np.linspace(660.0, 940.0, 50)
    start = time.perf_counter()
    for temp in temps:
        live.step_left_s(2, float(temp))
    eta_s = (time.perf_counter() - start) / temps.size
    return {
        "ovenmodel_fit": {
            "value": round(fit_large, 3), "unit": f"s to learn {large:g} h of 1 Hz log",
            "target": "<= 2", "ok": fit_large <= 2.0,
            "growth": f"{small:g} h: {fit_small:.3f} s, {large:g} h: {fit_large:.3f} s",
        },
        "ovenmodel_plan_predict": {
            "value": round(plan_s * 1000, 1), "unit": "ms per 24 h profile",
            "target": "<= 500", "ok": plan_s <= 0.5,
        },
        "ovenmodel_plan_predict_equalized": {
            "value": round(plan_eq_s * 1000, 1), "unit": "ms per 24 h profile, 2 equalized holds",
            "target": "<= 500", "ok": plan_eq_s <= 0.5,
        },
        "ovenmodel_live_eta": {
            "value": round(eta_s * 1000, 2), "unit": "ms per status",
            "target": "<= 5", "ok": eta_s <= 0.005,
        },
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="shorter logs, one run each")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    args = parser.parse_args()
    figures = run(args.quick)
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        for name, f in figures.items():
            mark = {True: "ok", False: "SLOW", None: ""}[f["ok"]]
            print(f"{name:32s} {f['value']:>10} {f['unit']}  (target {f['target']}) {mark}"
                  + (f"  [{f['growth']}]" if "growth" in f else ""))
    return 0 if all(f["ok"] is not False for f in figures.values()) else 1


if __name__ == "__main__":
    raise SystemExit(main())
