"""Every benchmark in tests/bench/, one table: figure, value, unit, target, ok.

    python tests/bench/run.py [--quick] [--json] [--only NAME ...]

Each benchmark module has `run(quick: bool) -> dict[str, dict]` returning
{figure: {"value": float, "unit": str, "target": str, "ok": bool | None, ...}};
extra keys (such as "growth") are printed as notes. Not part of the test suite.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import os
import platform
import sys
import time
import traceback
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent

# Run order: cheap and foundational first.
MODULES = [
    "sim_speed",
    "engine_speed",
    "runlog_write",
    "log_lock",
    "replay_speed",
    "whatif_speed",
    "chart_redraw",
    "modbus_rate",
    "watch_cost",
    "mqtt_outage",
    "equalize",
    "load_equalize",
    "ovenmodel_fit",
    "fuzz_hostile",
    "trials",
]


def load(name: str):  # noqa: ANN201 - a module
    path = HERE / f"{name}.py"
    if not path.exists():
        return None
    spec = importlib.util.spec_from_file_location(f"bench_{name}", path)
    assert spec and spec.loader
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses in a benchmark look their module up
    spec.loader.exec_module(module)
    return module


def _derived(figures: dict[str, dict]) -> None:
    """Figures computed from two others: the engine's overhead over the simulator alone."""
    engine = figures.get("simulated_s_per_wall_s", {}).get("value")
    alone = figures.get("sim_speed_plate_1s", {}).get("value")
    if engine and alone:
        figures["engine_overhead"] = {
            "value": round(alone / engine, 2), "unit": "x slower than the simulator alone",
            "target": "report (lower is better)", "ok": None,
            "note": "engine + rules + run log + in-process simulator, against the simulator",
        }


def machine() -> dict[str, str]:
    import numpy

    return {
        "cores": str(os.cpu_count()),
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "machine": platform.machine(),
        "system": platform.system(),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller sizes (under a minute)")
    parser.add_argument("--json", action="store_true", help="one JSON object by figure name")
    parser.add_argument("--only", nargs="*", default=None, help="run only these benchmarks")
    args = parser.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    figures: dict[str, dict] = {}
    started = time.perf_counter()
    for name in MODULES:
        if args.only and name not in args.only:
            continue
        module = load(name)
        if module is None:
            figures[f"{name}: missing"] = {"value": None, "unit": "", "target": "",
                                           "ok": False, "note": "benchmark not written"}
            continue
        t0 = time.perf_counter()
        try:
            result = module.run(quick=args.quick)
        except Exception as exc:  # a failing benchmark is a figure, not a crash of the table
            figures[f"{name}: failed"] = {"value": None, "unit": "", "target": "", "ok": False,
                                          "note": f"{type(exc).__name__}: {exc}"}
            if not args.json:
                traceback.print_exc()
            continue
        for figure, values in result.items():
            figures[figure] = dict(values)
        if not args.json:
            print(f"  ({name}: {time.perf_counter() - t0:.1f} s)", file=sys.stderr)
    _derived(figures)
    elapsed = time.perf_counter() - started
    if args.json:
        print(json.dumps({"machine": machine(), "elapsed_s": round(elapsed, 1),
                          **figures}, indent=2, default=str))
        return 0
    info = machine()
    print(f"machine: {info['cores']} cores, {info['machine']}, Python {info['python']}, "
          f"numpy {info['numpy']}; total {elapsed:.1f} s{' (quick)' if args.quick else ''}")
    width = max((len(f) for f in figures), default=10)
    print(f"{'figure':<{width}}  {'value':>12}  {'unit':<14} {'target':<16} ok")
    for figure, v in figures.items():
        value = v.get("value")
        shown = "-" if value is None else (f"{value:,.3g}" if isinstance(value, float)
                                           and abs(value) < 1000 else f"{value:,.0f}"
                                           if isinstance(value, int | float) else str(value))
        ok = {True: "yes", False: "NO", None: "-"}[v.get("ok")]
        print(f"{figure:<{width}}  {shown:>12}  {v.get('unit', ''):<14} "
              f"{str(v.get('target', '')):<16} {ok}")
        for key in ("growth", "note"):
            if v.get(key):
                print(f"{'':<{width}}    {key}: {v[key]}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
