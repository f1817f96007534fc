"""Benchmark: one redraw of the live chart for a 7-day run logged at 1 Hz (604,800 samples).

A redraw is everything the live screen does per update: build the chart spec (thinning
four series to one min/max bucket per braille dot column) and render it to styled lines.
Also drawn by mark (the Linux console's block characters, or NO_COLOR), which must cost no
more. Target: under 20 ms. Run: .venv/bin/python tests/bench/chart_redraw.py [--quick]
"""

from __future__ import annotations

import argparse
import statistics
import time
from pathlib import Path

import numpy as np

from tuikiln.plan import plan_profile
from tuikiln.profile import load_profile
from tuikiln.ui.chartdata import LAST_HOUR, WHOLE_RUN, live_chart
from tuikiln.ui.chartdraw import render_chart
from tuikiln.ui.glyphs import BLOCK_GLYPHS, BRAILLE_GLYPHS, Glyphs
from tuikiln.ui.runfeed import SampleBuffer
from tuikiln.ui.widgets.chart import DARK_PALETTE

ROOT = Path(__file__).resolve().parents[2]
TARGET_MS = 20.0
WEEK_S = 7 * 86400


def week_run() -> tuple[SampleBuffer, dict, float]:
    t0 = 1_700_000_000.0
    t = t0 + np.arange(WEEK_S, dtype=float)
    rng = np.random.default_rng(0)
    chamber = 500 + 300 * np.sin(np.arange(WEEK_S) / 20000.0) + rng.normal(0, 0.3, WEEK_S)
    chamber[300_000] += 60.0  # one overshoot sample
    buffer = SampleBuffer()
    buffer.append({"t": t, "chamber_c": chamber, "load_c": chamber - 8, "core_c": chamber - 12,
                   "setpoint_c": chamber + 2, "output_pct": np.full(WEEK_S, 40.0),
                   "step": np.full(WEEK_S, 3.0), "state": np.full(WEEK_S, 5.0)})
    status = {"step": 3, "time_to_next_step_s": 600.0, "setpoint_c": 800.0, "time": t[-1]}
    return buffer, status, t0


def time_redraw(buffer: SampleBuffer, status: dict, t0: float, width: int, height: int,
                zoom: str, repeats: int, glyphs: Glyphs = BRAILLE_GLYPHS) -> float:
    plan = plan_profile(load_profile(ROOT / "profiles" / "demo-harden-temper.toml"))
    now = float(buffer.last_t or t0)
    timings = []
    for _ in range(repeats):
        start = time.perf_counter()
        spec = live_chart(plan, buffer, status, t0, now, "F", zoom=zoom)
        render_chart(spec, width, height, DARK_PALETTE, glyphs=glyphs)
        timings.append((time.perf_counter() - start) * 1000.0)
    return statistics.median(timings)


def run(quick: bool = False) -> dict[str, dict]:
    buffer, status, t0 = week_run()
    repeats = 5 if quick else 30
    results: dict[str, dict] = {}
    for name, width, height, zoom, glyphs in (
        ("redraw_7d_100x30_whole_ms", 64, 22, WHOLE_RUN, BRAILLE_GLYPHS),
        ("redraw_7d_160x48_whole_ms", 124, 40, WHOLE_RUN, BRAILLE_GLYPHS),
        ("redraw_7d_160x48_last_hour_ms", 124, 40, LAST_HOUR, BRAILLE_GLYPHS),
        ("redraw_7d_160x48_whole_by_mark_ms", 124, 40, WHOLE_RUN, BLOCK_GLYPHS),
    ):
        value = time_redraw(buffer, status, t0, width, height, zoom, repeats, glyphs)
        results[name] = {"value": round(value, 2), "unit": "ms", "target": f"< {TARGET_MS:g}",
                         "ok": value < TARGET_MS}
    return results


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    args = parser.parse_args()
    for name, figure in run(args.quick).items():
        mark = "ok" if figure["ok"] else "OVER TARGET"
        print(f"{name:34} {figure['value']:8.2f} {figure['unit']}  (target {figure['target']})"
              f"  {mark}")


if __name__ == "__main__":
    main()
