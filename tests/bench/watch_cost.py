"""Benchmark: what watching costs.

1. CPU time / wall time of the engine (a real `tuikiln run --headless` process on the
   simulator at real time, 1 Hz) plus the live screen attached to it (headless Textual,
   polling once a second) over 60 s (--quick: 15 s). Target: at most 2 % of one core.
2. Resident memory of the live screen attached to a 7-day run logged at 1 Hz (604,800
   samples in a real run log), measured in a fresh process. Target: at most 150 MB RSS.

Run: .venv/bin/python tests/bench/watch_cost.py [--quick]
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PROFILE = ROOT / "profiles" / "demo-harden-temper.toml"
CPU_TARGET_PCT = 2.0
RSS_TARGET_MB = 150.0
WEEK_S = 7 * 86400


def process_cpu_s(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    ticks = os.sysconf("SC_CLK_TCK")
    return (int(fields[11]) + int(fields[12])) / ticks  # utime + stime


def rss_mb(pid: int | str = "self") -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024.0
    return float("nan")


async def watch_for(seconds: float, data_dir: Path) -> tuple[float, float]:
    """(engine CPU s, screen CPU s) over `seconds` of wall time."""
    from tuikiln import control
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.launcher import Launcher
    from tuikiln.ui.screens.live import LiveScreen

    kiln = data_dir / "kiln.toml"
    kiln.write_text('name = "Bench oven"\nunits = "C"\n[device]\nkind = "sim"\nspeed = 1\n')
    launcher = Launcher(data_dir / "data", str(kiln))
    run_id = await asyncio.to_thread(launcher.start, str(PROFILE))
    engine_pid = control.active_runs(launcher.data_dir)[0].pid
    try:
        link = launcher.link(run_id)
        app = TuikilnApp(lambda: LiveScreen(link, poll_s=1.0), units="C")
        async with app.run_test(size=(100, 30)) as pilot:
            await pilot.pause(2.0)  # attach and first full read, not counted
            engine_before, screen_before = process_cpu_s(engine_pid), time.process_time()
            await asyncio.sleep(seconds)
            engine_cpu = process_cpu_s(engine_pid) - engine_before
            screen_cpu = time.process_time() - screen_before
    finally:
        for active in control.active_runs(launcher.data_dir):
            control.request(active.socket, "abort")
    return engine_cpu, screen_cpu


def write_week(data_dir: Path) -> int:
    """A 7-day 1 Hz run in a real run log (written through the engine's own recorder)."""
    import math

    from tuikiln.profile import load_profile
    from tuikiln.runlog import RunLog

    profile = load_profile(PROFILE)
    log = RunLog.in_folder(data_dir)
    recorder = log.start_run(kiln="Bench oven", profile=profile.name, started=1.7e9,
                             profile_text=profile.source, profile_path=str(PROFILE),
                             batch=50_000)
    for i in range(WEEK_S):
        c = 500.0 + 300.0 * math.sin(i / 20000.0)
        recorder.sample(1.7e9 + i, c, c - 8, c - 12, c + 2, 40.0, 3, 5, 0)
    recorder.end("completed", 1.7e9 + WEEK_S)
    recorder.close()
    return recorder.run_id


async def memory_child(data_dir: Path, run_id: int) -> float:
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.loglink import LogLink
    from tuikiln.ui.screens.live import LiveScreen

    link = LogLink(data_dir, run_id)
    app = TuikilnApp(lambda: LiveScreen(link, poll_s=1.0), units="C")
    async with app.run_test(size=(160, 48)) as pilot:
        screen = pilot.app.screen
        for _ in range(300):
            await pilot.pause(0.1)
            if isinstance(screen, LiveScreen) and len(screen.samples) >= WEEK_S:
                break
        await pilot.pause(2.5)  # a few more polls and redraws
        assert len(screen.samples) == WEEK_S, len(screen.samples)
        return rss_mb()


def run(quick: bool = False) -> dict[str, dict]:
    seconds = 15.0 if quick else 60.0
    results: dict[str, dict] = {}
    with tempfile.TemporaryDirectory() as folder:
        engine_cpu, screen_cpu = asyncio.run(watch_for(seconds, Path(folder)))
    share = (engine_cpu + screen_cpu) / seconds * 100.0
    results["watch_cpu_engine_plus_screen_pct"] = {
        "value": round(share, 2), "unit": "% of one core", "target": f"<= {CPU_TARGET_PCT:g}",
        "ok": share <= CPU_TARGET_PCT}
    results["watch_cpu_engine_pct"] = {"value": round(engine_cpu / seconds * 100, 2),
                                       "unit": "% of one core", "target": "(part of the above)",
                                       "ok": True}
    with tempfile.TemporaryDirectory() as folder:
        run_id = write_week(Path(folder))
        out = subprocess.run([sys.executable, __file__, "--memory-child", folder, str(run_id)],
                             capture_output=True, text=True, timeout=300, cwd=str(ROOT))
        rss = json.loads(out.stdout.strip().splitlines()[-1])["rss_mb"] if out.returncode == 0 \
            else float("nan")
        if out.returncode != 0:
            print(out.stderr[-2000:], file=sys.stderr)
    results["live_screen_rss_7d_run_mb"] = {"value": round(rss, 1), "unit": "MB",
                                            "target": f"<= {RSS_TARGET_MB:g}",
                                            "ok": rss <= RSS_TARGET_MB}
    return results


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="15 s instead of 60 s")
    parser.add_argument("--memory-child", nargs=2, metavar=("DATA", "RUN"),
                        help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_child:
        rss = asyncio.run(memory_child(Path(args.memory_child[0]), int(args.memory_child[1])))
        print(json.dumps({"rss_mb": rss}))
        return
    for name, figure in run(args.quick).items():
        mark = "ok" if figure["ok"] else "OVER TARGET"
        print(f"{name:36} {figure['value']:8} {figure['unit']}  (target {figure['target']})"
              f"  {mark}")


if __name__ == "__main__":
    main()
