"""Benchmark: the run log's write rate and longest commit, and the read of a week of samples.

    .venv/bin/python tests/bench/runlog_write.py [--quick]

Targets: >= 20,000 samples/s written, no commit longer than 50 ms (the engine commits inside
its loop), 604,800 samples (a week at 1 s) read into numpy in well under a second, and a live
run (one sample a commit, as at 1 s) writing at most three WAL frames per sample: each sample
is written once, so a commit costs the pages its row lands on (SQLite writes whole 4 KB pages:
the table's last page and its index's), never a growing block (which cost 53 KB a sample).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

from tuikiln.runlog import RunLog

TARGET_RATE = 20_000.0
TARGET_COMMIT_S = 0.050
TARGET_READ_S = 1.0
TARGET_LIVE_BYTES = 3 * (4096 + 24)  # per sample: three WAL frames (a page and its header)


def live_bytes_per_sample(n: int = 3000) -> float:
    """WAL bytes per sample when each commit carries one sample (a 1 s tick): the WAL
    grows by every page a commit writes, and nothing copies it back in this short test."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "runs.sqlite"
        log = RunLog(path)
        rec = log.start_run(kiln="bench", profile="live", started=0.0)
        rec.flush()
        wal = path.with_name(path.name + "-wal")
        before = wal.stat().st_size
        for i in range(n):
            rec.sample(float(i), 500.0, 480.0, 470.0, 510.0, 40.0, 0, 5, 0)
            rec.flush()
        grown = wal.stat().st_size - before
        rec.close()
        log.close()
    return grown / n


def run(quick: bool = False) -> dict[str, dict]:
    n = 60_480 if quick else 604_800
    with tempfile.TemporaryDirectory() as folder:
        log = RunLog(Path(folder) / "runs.sqlite")
        rec = log.start_run(kiln="bench", profile="week", started=0.0)
        start = time.perf_counter()
        for i in range(n):
            rec.sample(float(i), 500.0 + (i % 600) * 0.5, 480.0 if i % 2 else None, 470.0,
                       510.0, 40.0, i // 86_400, 5, 0)
        rec.end("completed", float(n))
        rate = n / (time.perf_counter() - start)
        commit = rec.longest_commit_s
        start = time.perf_counter()
        samples = log.samples(rec.run_id)
        read_s = time.perf_counter() - start
        rec.close()
        log.close()
    assert len(samples["t"]) == n
    live = live_bytes_per_sample(1000 if quick else 3000)
    return {
        "live_wal_bytes": {"value": round(live), "unit": "B per sample", "target":
                           TARGET_LIVE_BYTES, "ok": live <= TARGET_LIVE_BYTES},
        "samples_per_s": {"value": round(rate), "unit": "samples/s", "target": TARGET_RATE,
                          "ok": rate >= TARGET_RATE},
        "longest_commit_ms": {"value": round(commit * 1000, 1), "unit": "ms",
                              "target": TARGET_COMMIT_S * 1000, "ok": commit <= TARGET_COMMIT_S},
        "read_week_s": {"value": round(read_s * (604_800 / n), 3), "unit": "s (per week)",
                        "target": TARGET_READ_S, "ok": read_s * (604_800 / n) < TARGET_READ_S},
    }


if __name__ == "__main__":
    for name, figure in run(quick="--quick" in sys.argv).items():
        sign = "<=" if name != "samples_per_s" else ">="
        print(f"{name:20} {figure['value']:>10} {figure['unit']} (target {sign} "
              f"{figure['target']:g})  {'ok' if figure['ok'] else 'MISSED'}")
