"""How soon after the load's real core is even does tuikiln say so, and is it ever early?

    python tests/bench/equalize.py [--quick] [--json] [--seed N] [--verbose]

Randomised scenarios on the simulator (which knows the real core temperature; the detector
never sees it): plates of 1-25 mm in carbon, tool and stainless steel; reading noise 0-3 °C
and whole-degree readings; with and without a thermocouple on the load; the oven's real
emissivity and convection drawn from half to twice the typical values, independently of the
estimator's own (deliberately slow) assumptions. Each scenario ramps the oven to a
hardening hold (800-1050 °C) or a temper (150-250 °C) and holds there; the detector is fed
one reading a second, exactly as the engine does (tuikiln.equalize.LoadWatch from the start,
the hold watched from when the chamber reaches the band).

Truth: the time the simulated core enters the band and stays there to the end of the run.
Lateness = declared - truth (negative = early, the one thing that must never happen).
Approach time = truth - start of heating. Saved against the rule of thumb = (time the chamber
reached the band + one hour per inch, common practice, no source) - declared.
"""

from __future__ import annotations

import argparse
import json
import math
import random
import sys
import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tuikiln.equalize import LoadWatch, rule_of_thumb_s  # noqa: E402
from tuikiln.limits import Limits  # noqa: E402
from tuikiln.simulator import LoadConfig, SimConfig, SimulatedKiln  # noqa: E402

MATERIALS = {"carbon steel": "1084", "tool steel": "AISI O1", "stainless": "440C"}
TYPICAL_EPS, TYPICAL_H = 0.8, 10.0  # the simulator's defaults: oxidised steel, still air
THIN_M = 0.006
AFTER_S = 1800.0  # keep running this long after both truth and declaration, to see it stays


@dataclass(frozen=True)
class Scenario:
    seed: int
    thickness_m: float
    material: str
    noise_c: float
    load_tc: bool
    eps_factor: float
    h_factor: float
    target_c: float
    ramp_c_per_h: float | None  # None: setpoint straight to the target


@dataclass(frozen=True)
class Outcome:
    scenario: Scenario
    truth_s: float | None
    declared_s: float | None
    reached_s: float | None
    rule_s: float | None
    eta_error_s: float | None
    eta_sigma_s: float | None
    lumped_ok: bool

    @property
    def late_s(self) -> float | None:
        if self.truth_s is None or self.declared_s is None:
            return None
        return self.declared_s - self.truth_s

    @property
    def saved_s(self) -> float | None:
        if self.reached_s is None or self.rule_s is None or self.declared_s is None:
            return None
        return self.reached_s + self.rule_s - self.declared_s


def draw(rng: random.Random, seed: int) -> Scenario:
    temper = rng.random() < 0.25
    return Scenario(
        seed=seed,
        thickness_m=math.exp(rng.uniform(math.log(0.001), math.log(0.025))),
        material=rng.choice(list(MATERIALS)),
        noise_c=rng.uniform(0.0, 3.0),
        load_tc=rng.random() < 0.5,
        eps_factor=math.exp(rng.uniform(math.log(0.5), math.log(2.0))),
        h_factor=math.exp(rng.uniform(math.log(0.5), math.log(2.0))),
        target_c=rng.uniform(150.0, 250.0) if temper else rng.uniform(800.0, 1050.0),
        ramp_c_per_h=None if rng.random() < 0.3 else rng.uniform(200.0, 900.0),
    )


def simulate(sc: Scenario, limits: Limits) -> Outcome:
    load = LoadConfig.of_material(
        sc.material, thickness_m=sc.thickness_m,
        emissivity=min(1.0, TYPICAL_EPS * sc.eps_factor), h_w_m2k=TYPICAL_H * sc.h_factor)
    config = replace(SimConfig(), load=load, load_thermocouple=sc.load_tc, noise_c=sc.noise_c,
                     load_noise_c=sc.noise_c, resolution_c=1.0, seed=sc.seed, speed=None)
    kiln = SimulatedKiln(config, seed=sc.seed)
    kiln.set_running(True)
    watch = LoadWatch(MATERIALS[sc.material], sc.thickness_m, window_s=limits.equalize_window,
                      slope_limit_c_per_s=limits.equalize_slope / 60.0,
                      confirm_s=limits.equalize_confirm)
    band = limits.band
    room = config.room_c
    t = 0.0
    reached = declared = None
    cores: list[float] = []
    eta_marks: list[tuple[float, float, float]] = []
    end = math.inf
    limit_s = 6 * 3600.0 + (0 if sc.ramp_c_per_h is None else
                            (sc.target_c - room) / sc.ramp_c_per_h * 3600.0)
    while t < min(end, limit_s):
        if sc.ramp_c_per_h is None:
            kiln.set_setpoint(sc.target_c)
        else:
            kiln.set_setpoint(min(sc.target_c, room + sc.ramp_c_per_h * t / 3600.0))
        kiln.advance(1.0)
        t += 1.0
        reading = kiln.read()
        cores.append(kiln.truth.load_core_c)  # type: ignore[arg-type]
        if reached is None and reading.chamber_c is not None and \
                abs(reading.chamber_c - sc.target_c) <= band:
            reached = t
            watch.begin_hold(sc.target_c, band)
        status = watch.update(t, reading.chamber_c, reading.load_c)
        if status is None:
            continue
        if declared is None and status.equalized:
            declared = status.since
        elif declared is None and status.eta_s is not None:
            eta_marks.append((t, status.eta_s, status.eta_sigma_s or 0.0))
        if end == math.inf and declared is not None:
            truth_now = _truth(cores, sc.target_c, band)
            if truth_now is not None:
                end = max(declared, truth_now) + AFTER_S
    truth = _truth(cores, sc.target_c, band)
    eta_error = eta_sigma = None
    if declared is not None and eta_marks and reached is not None:
        # the estimate given halfway between reaching the band and the declaration
        mid = reached + 0.5 * (declared - reached)
        mark = min(eta_marks, key=lambda m: abs(m[0] - mid))
        eta_error = mark[0] + mark[1] - declared
        eta_sigma = mark[2]
    return Outcome(sc, truth, declared, reached, rule_of_thumb_s(sc.thickness_m), eta_error,
                   eta_sigma, watch.model.lumped_ok)


def _truth(cores: list[float], target: float, band: float) -> float | None:
    """The time (s, samples 1 s apart from t = 1) the core entered the band for good."""
    outside = np.abs(np.asarray(cores) - target) > band
    if outside[-1]:
        return None
    idx = np.flatnonzero(outside)
    return float((idx[-1] + 1 if idx.size else 0) + 1)


def _median(values: list[float]) -> float | None:
    return float(np.median(values)) if values else None


def _p95(values: list[float]) -> float | None:
    return float(np.percentile(values, 95)) if values else None


def summarise(outcomes: list[Outcome]) -> dict[str, float | int | None]:
    late = [o.late_s for o in outcomes if o.late_s is not None]
    tc = [o.late_s for o in outcomes if o.late_s is not None and o.scenario.load_tc]
    est = [o for o in outcomes if o.late_s is not None and not o.scenario.load_tc]
    rel = [o.late_s / max(o.truth_s, 1.0) for o in est]  # type: ignore[operator]
    saved = [o.saved_s for o in outcomes if o.saved_s is not None]
    thin = [o.saved_s for o in outcomes if o.saved_s is not None
            and o.scenario.thickness_m <= THIN_M]
    thick = [o.saved_s for o in outcomes if o.saved_s is not None
             and o.scenario.thickness_m > THIN_M]
    eta = [abs(o.eta_error_s) for o in outcomes if o.eta_error_s is not None]
    return {
        "scenarios": len(outcomes),
        "early": sum(1 for v in late if v < 0),
        "never_declared": sum(1 for o in outcomes if o.declared_s is None),
        "never_even": sum(1 for o in outcomes if o.truth_s is None),
        "late_median_s": _median(late),
        "late_p95_s": _p95(late),
        "late_median_load_tc_s": _median(tc),
        "late_p95_load_tc_s": _p95(tc),
        "late_median_estimate_s": _median([o.late_s for o in est]),  # type: ignore[misc]
        "late_p95_estimate_s": _p95([o.late_s for o in est]),  # type: ignore[misc]
        "late_rel_median_estimate": _median(rel),
        "late_rel_p95_estimate": _p95(rel),
        "saved_vs_rule_median_s": _median(saved),
        "saved_vs_rule_median_thin_s": _median(thin),
        "saved_vs_rule_median_thick_s": _median(thick),
        "eta_abs_error_median_s": _median(eta),
    }


def run_all(quick: bool, seed: int = 2024, limits: Limits | None = None) -> list[Outcome]:
    rng = random.Random(seed)
    count = 12 if quick else 48
    limits = limits or Limits()
    return [simulate(draw(rng, seed * 1000 + i), limits) for i in range(count)]


def _figure(value: float | int | None, unit: str, target: str, ok: bool) -> dict[str, object]:
    return {"value": value, "unit": unit, "target": target, "ok": bool(ok)}


def run(quick: bool) -> dict[str, dict[str, object]]:
    """Figures for the bench runner: {name: {"value", "unit", "target", "ok"}}."""
    s = summarise(run_all(quick))

    def le(key: str, bound: float) -> bool:
        v = s[key]
        return v is not None and v <= bound

    thin = s["saved_vs_rule_median_thin_s"]
    return {
        "scenarios": _figure(s["scenarios"], "count", "12" if quick else ">= 40",
                             s["scenarios"] >= (12 if quick else 40)),
        "early": _figure(s["early"], "count", "0", s["early"] == 0),
        "never_declared": _figure(s["never_declared"], "count", "0", s["never_declared"] == 0),
        "late_median_load_tc": _figure(s["late_median_load_tc_s"], "s", "<= 60",
                                       le("late_median_load_tc_s", 60)),
        "late_p95_load_tc": _figure(s["late_p95_load_tc_s"], "s", "<= 180",
                                    le("late_p95_load_tc_s", 180)),
        "late_rel_median_estimate": _figure(s["late_rel_median_estimate"], "of approach",
                                            "<= 0.10", le("late_rel_median_estimate", 0.10)),
        "saved_vs_rule_median_thin": _figure(thin, "s", "> 0", thin is not None and thin > 0),
        "saved_vs_rule_median": _figure(s["saved_vs_rule_median_s"], "s", "(shown)", True),
        "late_median": _figure(s["late_median_s"], "s", "(shown)", True),
        "late_p95": _figure(s["late_p95_s"], "s", "(shown)", True),
        "eta_abs_error_median": _figure(s["eta_abs_error_median_s"], "s", "(shown)", True),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="12 scenarios instead of 48")
    parser.add_argument("--json", action="store_true", help="one JSON object on stdout")
    parser.add_argument("--seed", type=int, default=2024)
    parser.add_argument("--verbose", action="store_true", help="one line per scenario")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    outcomes = run_all(args.quick, args.seed)
    summary = summarise(outcomes)
    summary["wall_s"] = round(time.perf_counter() - started, 1)
    if args.verbose:
        for o in outcomes:
            sc = o.scenario
            print(f"{sc.seed:6d} {sc.thickness_m * 1000:5.1f}mm {sc.material:12s} "
                  f"{'TC ' if sc.load_tc else 'est'} n={sc.noise_c:.1f} eps*{sc.eps_factor:.2f} "
                  f"h*{sc.h_factor:.2f} {sc.target_c:6.0f}C ramp={sc.ramp_c_per_h or 0:4.0f} "
                  f"truth={o.truth_s} decl={o.declared_s} late={o.late_s} saved={o.saved_s} "
                  f"eta_err={o.eta_error_s}", file=sys.stderr)
    if args.json:
        print(json.dumps(summary))
    else:
        for key, value in summary.items():
            shown = f"{value:.3g}" if isinstance(value, float) else str(value)
            print(f"{key:32s} {shown}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
