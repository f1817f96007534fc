"""How long a replay takes, loading from SQLite included: a 24 h and a 7-day 1 Hz run log.

    python tests/bench/replay_speed.py [--quick] [--json]

The log is written once into a temporary SQLite file through tuikiln.runlog's RunRecorder (as
the engine writes it), for a profile that ramps, holds 24 h / 7 days with a door opening in
the middle, and cools. Timed: RunLog.samples + events, then tuikiln.analysis.replay.replay_run
with the logged step states (the figure the target is for). Target: a 7-day 1 Hz log (604,800
samples) analysed in under 1 s. Also shown, as a note: the same log with the engine's rules
run again over every sample (what-if and other tools' logs), by the rules' array forms
(tests/bench/whatif_speed.py times them alone, and against one sample at a time).
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tuikiln.analysis.replay import Trace, replay_run  # noqa: E402
from tuikiln.engine import states as st  # noqa: E402
from tuikiln.events import Event  # noqa: E402
from tuikiln.limits import Limits  # noqa: E402
from tuikiln.profile import parse_profile  # noqa: E402
from tuikiln.runlog import RunLog  # noqa: E402

START = 1_700_000_000.0
TARGET_S = 1.0


def _profile_text(hold_s: float) -> str:
    return f"""
name = "bench"
units = "C"
[[step]]
ramp = "600/h"
to = 620
[[step]]
hold = "{int(hold_s)}s"
[[step]]
cool = "free"
to = 100
"""


def write_log(folder: Path, seconds: int) -> tuple[RunLog, int, str]:
    """A synthetic run of `seconds` samples at 1 Hz: ramp 1 h, hold, cool 1 h."""
    ramp_s, cool_s = 3600, 3600
    hold_s = seconds - ramp_s - cool_s
    text = _profile_text(hold_s)
    log = RunLog(folder / "runs.sqlite")
    rec = log.start_run(kiln="bench", profile="bench", started=START, profile_text=text,
                        batch=50_000)
    rng = np.random.default_rng(0)
    t = np.arange(seconds, dtype=float)
    temp = np.where(t < ramp_s, 20.0 + 600.0 * t / ramp_s, 620.0)
    cool_at = ramp_s + hold_s
    temp = np.where(t >= cool_at, 620.0 - 520.0 * (t - cool_at) / cool_s, temp)
    door = (t > ramp_s + hold_s / 2) & (t < ramp_s + hold_s / 2 + 300)
    temp = temp - np.where(door, 60.0, 0.0) + rng.normal(0.0, 0.3, seconds)
    step = np.where(t < ramp_s, 0, np.where(t < cool_at, 1, 2))
    holding, slipped = st.STATE_CODE[st.HOLDING], st.STATE_CODE[st.SLIPPED]
    state = np.where(step == 0, st.STATE_CODE[st.HEATING],
                     np.where(step == 1, np.where(door, slipped, holding),
                              st.STATE_CODE[st.COASTING]))
    for i in range(seconds):
        rec.sample(START + i, float(temp[i]), float(temp[i]) - 1.0, None, 620.0, 40.0,
                   int(step[i]), int(state[i]), 0)
    for index, at in ((0, 0), (1, ramp_s), (2, cool_at)):
        rec.event(Event(START + at, "step-start", f"Step {index + 1}", "info",
                        {"index": index}))
    for index, at in ((0, ramp_s), (1, cool_at), (2, seconds - 1)):
        rec.event(Event(START + at, "step-end", f"Step {index + 1} done", "info",
                        {"index": index, "hold_clock_s": hold_s - 300.0,
                         "out_of_band_s": 300.0} if index == 1 else {"index": index}))
    rec.end("completed", START + seconds)
    rec.close()
    return log, rec.run_id, text


def time_replay(log: RunLog, run_id: int, text: str, rules: bool = False) -> tuple[float, str]:
    profile = parse_profile(text, "bench")
    started = time.perf_counter()
    info = log.run(run_id)
    assert info is not None
    trace = Trace.from_samples(log.samples(run_id), info.started)
    result = replay_run(trace, profile, Limits(), events=log.events(run_id),
                        outcome=info.outcome, rerun=rules)
    return time.perf_counter() - started, result.verdict


def run(quick: bool) -> dict[str, dict]:
    sizes = {"24 h": 86_400} if quick else {"24 h": 86_400, "7 d": 604_800}
    out: dict[str, dict] = {}
    timings: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, seconds in sizes.items():
            folder = Path(tmp) / name.replace(" ", "")
            folder.mkdir()
            log, run_id, text = write_log(folder, seconds)
            best = min(time_replay(log, run_id, text)[0] for _ in range(3))
            timings[name] = best
            target = TARGET_S  # the target is for the 7-day log; 24 h shows the growth
            out[f"replay {name} log ({seconds:,} samples), SQLite load included"] = {
                "value": round(best, 3), "unit": "s", "target": f"< {target:.2f}",
                "ok": best < target}
            if name == "24 h":
                rules_s, _ = time_replay(log, run_id, text, rules=True)
                out["engine rules re-run over the 24 h log (what-if, CSV)"] = {
                    "value": round(rules_s, 2), "unit": "s", "target": "note", "ok": None}
            log.close()
    if "7 d" in timings:
        key = next(k for k in out if k.startswith("replay 7 d"))
        growth = timings["7 d"] / timings["24 h"]
        out[key]["growth"] = f"x{growth:.1f} for x7 samples"
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    figures = run(args.quick)
    if args.json:
        print(json.dumps(figures, indent=2))
        return
    for name, f in figures.items():
        extra = f"  ({f['growth']})" if "growth" in f else ""
        print(f"{name}: {f['value']} {f['unit']} (target {f['target']}, ok {f['ok']}){extra}")


if __name__ == "__main__":
    main()
