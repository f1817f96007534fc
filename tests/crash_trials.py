"""Crash trials: kill -9 the engine at random moments while a served simulator keeps the oven.

    .venv/bin/python tests/crash_trials.py --trials 20 [--kills 2] [--speed 120] [--seed 1]

Each trial starts `tuikiln sim serve --tcp 0` as its own process (the oven keeps its state
and its controller its setpoint while the engine is dead), runs a short two-temperature
profile with `tuikiln run --headless` against it over Modbus RTU framing on TCP, kills the
engine with SIGKILL at random moments and starts it again with `tuikiln run --resume
--headless` (no profile: the unfinished run is found in the log). A trial passes when:

- the log holds one run, completed, with every step ended and each hold's clock full;
- there is one GAP event per crash;
- at most one sample is lost per crash: the engine takes a sample a second and commits each
  one within its tick, so between the last committed sample and the kill no more than one
  tick's sample may be missing (the restart time itself, engine down, is not counted).

A power-cut trial (`power_cut=True`) also switches the controller's output off over Modbus
(register 4, run/stop) while the engine is down, so the oven cools: the GAP shows the drop
and the run still completes. `policy="hold"` checks the hold-safe path (heat off at once,
carried on by `tuikiln resume`); `policy="end"` checks the ending.

tests/test_recovery_crash.py runs a quick setting (3 trials) in CI; this script runs many
and prints the figures (trials run and passed, samples lost per crash).
"""

from __future__ import annotations

import argparse
import json
import os
import random
import signal
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))  # run as a script too: `python tests/crash_trials.py`

from tests.simserve import ServedSim  # noqa: E402
from tests.waiting import let_time_pass, wait_until  # noqa: E402

PYTHON = sys.executable
TICK_S = 1.0

PROFILE = """
name = "crash trial"
units = "C"
about = "Invented for the crash trials: two short holds at two temperatures."
[[step]]
ramp = "max"
to = 110
[[step]]
hold = "{hold}s"
[[step]]
ramp = "900/min"
to = 150
[[step]]
hold = "{hold}s"
"""


def kiln_text(port: int, policy: str) -> str:
    return f"""name = "Trial oven"
units = "C"
max = 1100
on_restart = "{policy}"
[device]
kind = "modbus"
port = "tcp://127.0.0.1:{port}"
map = "sim"
poll = 1
timeout = 0.5
"""


class TrialSim(ServedSim):
    """`tuikiln sim serve --tcp 0` in its own process group; stopped at the end."""

    def __init__(self, speed: float, *extra: str) -> None:
        super().__init__("--tcp", "0", "--speed", str(speed), "--seed", "1", *extra,
                         wait_s=20.0)
        if not self.where.startswith("tcp://"):
            self.stop()
            raise RuntimeError(f"sim serve did not start ({self.where!r})")
        self.port = int(self.where.rsplit(":", 1)[1])

    def registers(self) -> list[int]:
        client = _client(self.port)
        try:
            reply = client.read_holding_registers(0, count=6, device_id=1)
            return list(reply.registers)
        finally:
            client.close()

    def run_off(self) -> None:
        """What a power cut does to the heat: the controller's output off (register 4)."""
        client = _client(self.port)
        try:
            client.write_register(4, 0, device_id=1)
        finally:
            client.close()



def _client(port: int):  # noqa: ANN202 - pymodbus' client type
    from pymodbus import FramerType
    from pymodbus.client import ModbusTcpClient

    client = ModbusTcpClient("127.0.0.1", port=port, framer=FramerType.RTU, timeout=2)
    if not client.connect():
        raise RuntimeError(f"cannot reach the simulator on port {port}")
    return client


@dataclass
class TrialResult:
    name: str
    ok: bool
    problems: list[str] = field(default_factory=list)
    kills: list[float] = field(default_factory=list)
    lost_samples: list[int] = field(default_factory=list)
    lost_s: list[float] = field(default_factory=list)
    wall_s: float = 0.0
    gaps: list[dict] = field(default_factory=list)
    outcome: str | None = None


class Trial:
    def __init__(self, name: str, *, seed: int, kills: int = 1, speed: float = 120.0,
                 policy: str = "continue", power_cut: bool = False, hold_s: int = 5,
                 folder: Path | None = None) -> None:
        self.name = name
        self.hold_s = hold_s
        self.rng = random.Random(seed)
        self.kills = kills
        self.speed = speed
        self.policy = policy
        self.power_cut = power_cut
        self._tmp = None if folder is not None else tempfile.TemporaryDirectory()
        self.folder = folder or Path(self._tmp.name)  # type: ignore[union-attr]
        self.data = self.folder / "data"
        self.result = TrialResult(name, False)

    # ----- processes -----

    def _engine(self, *args: str) -> subprocess.Popen[str]:
        log = open(self.folder / "engine.log", "a")  # noqa: SIM115 - closed with the process
        return subprocess.Popen(
            [PYTHON, "-m", "tuikiln", "--data", str(self.data), "--kiln",
             str(self.folder / "kiln.toml"), "run", *args, "--headless"],
            cwd=REPO, stdout=log, stderr=subprocess.STDOUT, text=True,
            env={**os.environ, "INVOCATION_ID": ""})

    def _wait_log(self, proc: subprocess.Popen[str], what: str, timeout: float,
                  check: Callable[[Any, Any], bool]) -> None:
        """Until `check(log, latest run)` holds or the engine exits (the caller sees which);
        AssertionError after `timeout` s. Each look opens the log: ten a second."""
        from tuikiln.runlog import RunLog

        def seen() -> bool:
            if proc.poll() is not None:
                return True
            path = self.data / "runs.sqlite"
            if not path.exists():
                return False
            log = RunLog(path)
            try:
                run = log.latest_run()
                return run is not None and check(log, run)
            finally:
                log.close()

        wait_until(seen, timeout, what, every=0.1)

    def _wait_samples(self, proc: subprocess.Popen[str], at_least: int, timeout: float) -> None:
        self._wait_log(proc, f"{at_least} samples in the log", timeout,
                       lambda log, run: log.sample_count(run.id) >= at_least)

    def _wait_event(self, proc: subprocess.Popen[str], kind: str, timeout: float) -> None:
        self._wait_log(proc, f"a {kind} event in the log", timeout,
                       lambda log, run: any(e["kind"] == kind for e in log.events(run.id)))

    def run(self) -> TrialResult:
        start = time.monotonic()
        sim = TrialSim(self.speed)
        try:
            (self.folder / "kiln.toml").write_text(kiln_text(sim.port, self.policy))
            (self.folder / "p.toml").write_text(PROFILE.replace("{hold}", str(self.hold_s)))
            proc = self._engine(str(self.folder / "p.toml"))
            samples = 2
            for _ in range(self.kills):
                self._wait_samples(proc, samples, 30.0)
                if self.power_cut:
                    # Cut the power once the oven is at its first hold (a cut mid heat-up
                    # would still rise a little on the elements' stored heat).
                    self._wait_event(proc, "step-end", 30.0)
                    let_time_pass(self.rng.uniform(0.0, 1.5), "a random moment into the hold")
                else:
                    let_time_pass(self.rng.uniform(0.0, 4.0), "a random moment of the run")
                if proc.poll() is not None:
                    self.result.problems.append("the run ended before the kill")
                    break
                os.kill(proc.pid, signal.SIGKILL)
                self.result.kills.append(time.time())
                proc.wait(timeout=10)
                if self.power_cut:
                    sim.run_off()
                    # How long the power is off is the scenario, not a wait: the check is the
                    # GAP's drop. (Cooling on until the restart reads it; a deeper cut, out of
                    # the hold's band, makes the run wait for the load and take ~20 s longer.)
                    let_time_pass(2.0, "the power cut lasts 2 s (4 min simulated at 120x)")
                proc = self._engine("--resume")
                samples += 4
            if self.policy == "hold":
                self._resume_when_held(proc, sim)
            code = proc.wait(timeout=120)
            expected = 2 if self.policy == "end" else 0
            if code != expected:
                self.result.problems.append(f"the engine exited {code}, not {expected}")
            if self.policy == "end":
                regs = sim.registers()
                if regs[4] != 0 or regs[1] != 0:
                    self.result.problems.append(f"heat not off after the end: {regs}")
            self._check()
        except Exception as exc:  # noqa: BLE001 - a trial reports, it does not crash the batch
            self.result.problems.append(f"{type(exc).__name__}: {exc}")
        finally:
            sim.stop()
            self.result.wall_s = time.monotonic() - start
            self.result.ok = not self.result.problems
            if self._tmp is not None and self.result.ok:
                self._tmp.cleanup()
        return self.result

    def _resume_when_held(self, proc: subprocess.Popen[str], sim: TrialSim) -> None:
        def asks(log: Any, run: Any) -> bool:
            kinds = [e["kind"] for e in log.events(run.id)]
            return kinds.count("gap") >= self.kills and "operator-needed" in kinds[-5:]

        try:
            self._wait_log(proc, "the resumed engine to ask to be resumed", 30.0, asks)
            asked = proc.poll() is None
        except AssertionError:
            asked = False
        if not asked:
            self.result.problems.append("the resumed engine never asked to be resumed")
            return
        let_time_pass(1.5, "held a moment before a person resumes: the heat stays off")
        regs = sim.registers()
        if regs[4] != 0 or regs[1] != 0:
            self.result.problems.append(f"heat not off while held: {regs}")
        done = subprocess.run(
            [PYTHON, "-m", "tuikiln", "--data", str(self.data), "--kiln",
             str(self.folder / "kiln.toml"), "resume"], cwd=REPO,
            capture_output=True, text=True, timeout=30)
        if done.returncode != 0:
            self.result.problems.append(f"tuikiln resume failed: {done.stderr}")

    # ----- the verdict -----

    def _check(self) -> None:
        import numpy as np

        from tuikiln.runlog import RunLog

        log = RunLog(self.data / "runs.sqlite")
        try:
            runs = log.runs()
            problems = self.result.problems
            if len(runs) != 1:
                problems.append(f"{len(runs)} runs in the log, not one")
                return
            run = runs[0]
            self.result.outcome = run.status
            events = log.events(run.id)
            samples = log.samples(run.id)
        finally:
            log.close()
        gaps = [e for e in events if e["kind"] == "gap"]
        self.result.gaps = [e["detail"] for e in gaps]
        if len(gaps) != len(self.result.kills):
            problems.append(f"{len(gaps)} GAP events for {len(self.result.kills)} crashes")
        t = samples["t"]
        if len(t) and np.any(np.diff(t) <= 0):
            problems.append("sample times do not always increase")
        for kill in self.result.kills:
            before = t[t < kill]
            if not len(before):
                problems.append("no sample before a crash")
                continue
            since = kill - float(before[-1])
            lost = int(since // TICK_S)  # whole ticks taken but not committed at the kill
            self.result.lost_s.append(since)
            self.result.lost_samples.append(lost)
            if lost > 1:
                problems.append(f"{lost} samples lost at a crash ({since:.2f} s uncommitted)")
        if self.power_cut and gaps:
            detail = gaps[0]["detail"]
            if not (detail["after_c"] is not None and detail["before_c"] is not None
                    and detail["after_c"] < detail["before_c"] - 5):
                problems.append(f"the oven did not cool during the power cut: {detail}")
        if self.policy == "end":
            if run.status != "ended-after-restart":
                problems.append(f"outcome {run.status}, not ended-after-restart")
            return
        if run.status != "completed":
            problems.append(f"outcome {run.status}, not completed")
        ends = [e["detail"] for e in events if e["kind"] == "step-end"]
        done = {d["index"] for d in ends if not d.get("skipped")}
        if done != {0, 1, 2, 3}:
            problems.append(f"steps ended: {sorted(done)}")
        for d in ends:
            if d.get("kind") == "hold" and d.get("hold_clock_s", 0.0) < self.hold_s - 1e-6:
                problems.append(f"hold of step {d['index'] + 1} ended with "
                                f"{d['hold_clock_s']:.1f} s on its clock")
        if self.policy == "hold":
            safe = [e for e in events if e["kind"] == "safe-state"
                    and e["detail"].get("reason") == "restart"]
            if len(safe) != len(self.result.kills) or not all(e["detail"]["done"] for e in safe):
                problems.append("the restarted engine did not drive the oven safe")


def run_trials(trials: list[Trial]) -> list[TrialResult]:
    """Run trials side by side (each has its own simulator and data folder)."""
    threads = [threading.Thread(target=trial.run) for trial in trials]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    return [trial.result for trial in trials]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=10)
    parser.add_argument("--kills", type=int, default=2, help="crashes per trial")
    parser.add_argument("--speed", type=float, default=120.0)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--parallel", type=int, default=4)
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)
    results: list[TrialResult] = []
    kinds = [("continue", False), ("continue", True), ("hold", False), ("end", False)]
    index = 0
    while index < args.trials:
        batch = []
        for _ in range(min(args.parallel, args.trials - index)):
            policy, cut = kinds[index % len(kinds)] if index >= 1 else ("continue", False)
            kills = 1 if policy == "end" else args.kills
            batch.append(Trial(f"trial {index + 1} ({policy}{', power cut' if cut else ''})",
                               seed=args.seed * 1000 + index, kills=kills, speed=args.speed,
                               policy=policy, power_cut=cut))
            index += 1
        for result in run_trials(batch):
            results.append(result)
            state = "ok" if result.ok else "FAILED: " + "; ".join(result.problems)
            print(f"{result.name}: {len(result.kills)} crashes, lost samples "
                  f"{result.lost_samples}, uncommitted "
                  f"{[round(x, 2) for x in result.lost_s]} s, {result.wall_s:.0f} s  {state}",
                  flush=True)
    passed = sum(r.ok for r in results)
    crashes = sum(len(r.kills) for r in results)
    lost = max((n for r in results for n in r.lost_samples), default=0)
    lost_s = max((x for r in results for x in r.lost_s), default=0.0)
    summary = {"trials": len(results), "passed": passed, "crashes": crashes,
               "max_samples_lost_per_crash": lost, "max_uncommitted_s": round(lost_s, 3)}
    print(json.dumps(summary) if args.json else
          f"trials {len(results)}, passed {passed}; crashes {crashes}; samples lost per crash "
          f"at most {lost} (at most {lost_s:.2f} s since the last commit)")
    return 0 if passed == len(results) else 1


if __name__ == "__main__":
    raise SystemExit(main())
