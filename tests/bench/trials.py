"""Profile trials: how many random valid profiles raise a false alarm, how many faults go
unnoticed (issue 16; goal 0 and 0).

    python tests/bench/trials.py [--quick] [--json] [--verbose]

Profiles and faults are drawn as tests/test_trials.py draws them (tests/trials.py), with a
fixed seed: clean runs on the simulator with its default noise must complete with no alarm;
runs with a welded relay, an open thermocouple or a lost link must raise the right critical
alarm and stop. Each failing profile is printed with --verbose, to be kept in
tests/trial_profiles/.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from hypothesis import HealthCheck, Phase, given, settings  # noqa: E402
from hypothesis import strategies as hs  # noqa: E402

from tests.trials import FAULTS, run_profile, trials  # noqa: E402
from tuikiln.engine import states as st  # noqa: E402


def _draw(strategy: hs.SearchStrategy, count: int) -> list:
    """`count` examples of `strategy`, the same ones every time."""
    drawn: list = []

    @settings(max_examples=count, derandomize=True, database=None, deadline=None,
              phases=[Phase.generate], suppress_health_check=list(HealthCheck))
    @given(strategy)
    def keep(example: object) -> None:
        drawn.append(example)

    keep()
    return drawn


def run(quick: bool, verbose: bool = False) -> dict[str, dict]:
    clean_n, fault_n = (20, 12) if quick else (150, 60)
    started = time.perf_counter()
    false_alarms = 0
    for trial in _draw(trials(), clean_n):
        result = asyncio.run(run_profile(trial.toml(), seed=trial.seed))
        if result.outcome != st.COMPLETED or result.raised:
            false_alarms += 1
            if verbose:
                print(f"false alarm {result.raised} {result.outcome}:\n{trial.toml()}")
    missed = 0
    faulted = hs.tuples(trials(max_steps=4), hs.sampled_from(sorted(FAULTS)), hs.integers(2, 60))
    for trial, fault, at_min in _draw(faulted, fault_n):
        trial.steps.append({"hold": "3h", "start": "reached"})
        table, right = FAULTS[fault]
        result = asyncio.run(run_profile(
            trial.toml(), seed=trial.seed, faults=f'[[device.fault]]\nat = "{at_min}m"\n{table}'))
        if result.outcome != st.STOPPED_BY_ALARM or not set(result.raised) & right:
            missed += 1
            if verbose:
                print(f"missed {fault} at {at_min} min ({result.raised}):\n{trial.toml()}")
    wall = time.perf_counter() - started
    return {
        "trials_run": {"value": clean_n + fault_n, "unit": "runs", "target": "none",
                       "ok": None, "growth": f"{clean_n} clean, {fault_n} with a fault, "
                       f"{wall:.0f} s wall"},
        "trials_false_alarms": {"value": false_alarms, "unit": "runs", "target": "0",
                                "ok": false_alarms == 0},
        "trials_missed_alarms": {"value": missed, "unit": "runs", "target": "0",
                                 "ok": missed == 0},
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="32 trials instead of 210")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    parser.add_argument("--verbose", action="store_true", help="print each failing profile")
    args = parser.parse_args()
    figures = run(args.quick, args.verbose)
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        for name, f in figures.items():
            mark = {True: "ok", False: "MISSED", None: ""}[f["ok"]]
            print(f"{name:24s} {f['value']:>6} {f['unit']}  (target {f['target']}) {mark}")
    return 0 if all(f["ok"] is not False for f in figures.values()) else 1


if __name__ == "__main__":
    raise SystemExit(main())
