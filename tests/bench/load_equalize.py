"""Estimate-only equalization against the simulator's true core: foil-wrapped and thick loads.

    python tests/bench/load_equalize.py [--quick] [--json] [--seed N] [--verbose]

Randomised scenarios (tests/load_scenarios.py): plates 2-60 mm thick, bare or in foil,
three ovens (4.5, 12 and 30 litres), three ramp shapes (straight up, a steady N/h ramp, a
preheat hold then straight up), hardening holds (800-1060 °C) and tempers (170-260 °C), the
oven's real heat transfer from half to twice the typical values; the width given to the
estimate in half of them. No load thermocouple: the hold start is the estimate's alone.

Lateness = declared - the time the true core entered the band for good (negative = early,
which must never happen). Figures: count early (target 0), lateness median and p95 overall,
for thick loads (25-60 mm) at hardening temperatures, and for foil packets.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tests.load_scenarios import Outcome, Scenario, scenarios, simulate  # noqa: E402

GRID_MM = (2, 6, 12, 25, 40, 50, 60)


def grid(target_c: float) -> list[Scenario]:
    """Typical heat transfer (every factor 1), width given, the 12-litre oven, straight to
    the target: lateness against thickness, bare and foil, without the draw's spread."""
    return [Scenario(900 + i, mm / 1000.0, max(mm, 50) / 1000.0, True, wrap, "tool steel",
                     "mid 12 l", "max", target_c, 400.0)
            for i, (mm, wrap) in enumerate((mm, wrap) for wrap in ("none", "foil")
                                           for mm in GRID_MM)]


def print_grid(target_c: float) -> None:
    print(f"typical oven, width given, straight to {target_c:.0f} °C: lateness, s")
    rows: dict[str, list[str]] = {}
    for sc in grid(target_c):
        o = simulate(sc)
        shown = "never" if o.late_s is None else f"{o.late_s:.0f}"
        rows.setdefault(sc.wrap, []).append(shown)
    print("  mm    " + "".join(f"{mm:>8d}" for mm in GRID_MM))
    for wrap, values in rows.items():
        print(f"  {wrap:6s}" + "".join(f"{v:>8s}" for v in values))


def _pct(values: list[float], q: float) -> float | None:
    return float(np.percentile(values, q)) if values else None


def summarise(outcomes: list[Outcome]) -> dict[str, float | int | None]:
    def late(pick) -> list[float]:  # noqa: ANN001
        return [o.late_s for o in outcomes if o.late_s is not None and pick(o.scenario)]

    groups = {
        "all": lambda s: True,
        "bare": lambda s: s.wrap == "none",
        "foil": lambda s: s.wrap == "foil",
        "thick_harden": lambda s: s.thickness_m >= 0.025 and s.target_c > 700.0,
        "thick_harden_bare": lambda s: (s.thickness_m >= 0.025 and s.target_c > 700.0
                                        and s.wrap == "none"),
        "thick_harden_foil": lambda s: (s.thickness_m >= 0.025 and s.target_c > 700.0
                                        and s.wrap == "foil"),
        "thin_harden": lambda s: s.thickness_m < 0.01 and s.target_c > 700.0,
        "temper": lambda s: s.target_c < 700.0,
    }
    out: dict[str, float | int | None] = {
        "scenarios": len(outcomes),
        "early": sum(1 for o in outcomes if o.late_s is not None and o.late_s < 0),
        "never_declared": sum(1 for o in outcomes if o.declared_s is None),
        "never_even": sum(1 for o in outcomes if o.truth_s is None),
    }
    for name, pick in groups.items():
        values = late(pick)
        out[f"late_median_{name}_s"] = _pct(values, 50)
        out[f"late_p95_{name}_s"] = _pct(values, 95)
        out[f"count_{name}"] = len(values)
    rel = [o.late_s / o.truth_s for o in outcomes
           if o.late_s is not None and o.truth_s and o.scenario.target_c > 700.0]
    out["late_rel_median_harden"] = _pct(rel, 50)
    return out


def run_all(quick: bool, seed: int = 19) -> list[Outcome]:
    return [simulate(sc) for sc in scenarios(12 if quick else 60, seed)]


def _figure(value: float | int | None, unit: str, target: str, ok: bool) -> dict[str, object]:
    return {"value": value, "unit": unit, "target": target, "ok": bool(ok)}


def run(quick: bool) -> dict[str, dict[str, object]]:
    """Figures for the bench runner: {name: {"value", "unit", "target", "ok"}}."""
    s = summarise(run_all(quick))
    figures = {
        "scenarios": _figure(s["scenarios"], "count", "(shown)", True),
        "early": _figure(s["early"], "count", "0", s["early"] == 0),
        "never_declared": _figure(s["never_declared"], "count", "0", s["never_declared"] == 0),
    }
    for key in ("all", "bare", "foil", "thick_harden_bare", "thick_harden_foil", "temper"):
        for stat in ("median", "p95"):
            name = f"late_{stat}_{key}_s"
            figures[name[:-2]] = _figure(s[name], "s", "(shown)", True)
    return figures


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="12 scenarios instead of 60")
    parser.add_argument("--json", action="store_true", help="one JSON object on stdout")
    parser.add_argument("--seed", type=int, default=19)
    parser.add_argument("--verbose", action="store_true", help="one line per scenario")
    parser.add_argument("--grid", action="store_true",
                        help="also print lateness against thickness at typical values")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    outcomes = run_all(args.quick, args.seed)
    summary = summarise(outcomes)
    summary["wall_s"] = round(time.perf_counter() - started, 1)
    if args.verbose:
        for o in outcomes:
            print(f"late={o.late_s} truth={o.truth_s} declared={o.declared_s}: "
                  f"{o.scenario.words()}", file=sys.stderr)
    if args.grid:
        for target in (1000.0, 200.0):
            print_grid(target)
    if args.json:
        print(json.dumps(summary))
    else:
        for key, value in summary.items():
            shown = f"{value:.3g}" if isinstance(value, float) else str(value)
            print(f"{key:34s} {shown}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
