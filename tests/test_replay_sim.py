"""Runs with known faults for the replay tests: the engine's own rules (RunRules) drive the
in-process simulator and every sample and event goes into a real SQLite run log, as the live
engine writes it (tuikiln.runlog.RunRecorder). Also the checks of those logs."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from tuikiln.analysis.replay import MET, MISSED, Trace, replay_run
from tuikiln.engine import states as st
from tuikiln.engine.rules import RunRules, TickInput
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog
from tuikiln.simulator import Fault, LoadConfig, OvenConfig, SimConfig, SimulatedKiln

START_T = 1_700_000_000.0

SHORT_C = """
name = "Short test: heat, hold, cool"
units = "C"
about = "Test profile (invented numbers, not a heat treatment)."

[[step]]
ramp = "max"
to = 500

[[step]]
hold = "30m"
label = "soak"

[[step]]
cool = "free"
to = 420
"""


def simulate_run(log: RunLog, profile_text: str, *, faults: tuple[Fault, ...] = (),
                 seed: int = 1, load_tc: bool = True, limit_s: float = 30_000.0,
                 every_s: float = 1.0, oven: OvenConfig | None = None,
                 load: LoadConfig | None = None,
                 on_tick: Callable[[float, RunRules], None] | None = None) -> int:
    """Run the profile on the simulator with the engine's rules; the run id in `log`
    (`oven`, `load`: another oven than the default one, with another load; `on_tick` is
    called with the time from the start and the rules after every tick)."""
    profile = parse_profile(profile_text, "test.toml")
    limits = Limits().merged(profile.limits)
    rules = RunRules(profile, limits, max_c=1200.0)
    config = SimConfig(oven=oven or OvenConfig(), load=load or LoadConfig(),
                       load_thermocouple=load_tc, faults=faults)
    kiln = SimulatedKiln(config, seed=seed)
    kiln.set_running(True)
    recorder = log.start_run(kiln="Simulated bench oven", profile=profile.name,
                             started=START_T, profile_text=profile_text, units=profile.units,
                             device="sim", speed="max")
    now = START_T
    stepper = rules.stepper
    while not rules.ended and now - START_T < limit_s:
        if stepper.waiting_for_operator:
            for event in rules.command(now, "ack", None, "test").events:
                recorder.event(event)
        r = kiln.read()
        decision = rules.tick(now, TickInput(r.chamber_c, r.load_c, r.output_pct, r.line_answers,
                                             r.sensor_fault))
        for event in decision.events:
            recorder.event(event)
        # As tuikiln.engine.runner logs a sample: the step index stays on the last step.
        recorder.sample(now, r.chamber_c, r.load_c, rules.core_c, stepper.setpoint_c,
                        r.output_pct, min(stepper.index, len(profile.steps) - 1),
                        st.STATE_CODE.get(stepper.state, 0), 0)
        if decision.setpoint_c is not None:
            kiln.set_setpoint(decision.setpoint_c)
        if on_tick is not None:
            on_tick(now - START_T, rules)
        kiln.advance(every_s)
        now += every_s
    recorder.end(rules.outcome or st.UNFINISHED, now)
    recorder.close()
    return recorder.run_id


@pytest.fixture(scope="module")
def door_log(tmp_path_factory: pytest.TempPathFactory) -> tuple[RunLog, int, int]:
    """A clean run and the same run with the door open 5 min, 10 min into the soak."""
    log = RunLog(Path(tmp_path_factory.mktemp("door")) / "runs.sqlite")
    clean = simulate_run(log, SHORT_C)
    samples = log.samples(clean)
    info = log.run(clean)
    assert info is not None
    trace = Trace.from_samples(samples, info.started)
    soak_start = float(trace.t[(trace.step == 1)][0]) - START_T
    door_at = soak_start + 600.0
    faulty = simulate_run(log, SHORT_C, faults=(Fault("door-open", door_at, 300.0),))
    return log, clean, faulty


def _replay(log: RunLog, run_id: int):  # noqa: ANN202
    info = log.run(run_id)
    assert info is not None
    profile = parse_profile(info.profile_text, "stored")
    limits = Limits().merged(profile.limits)
    return replay_run(Trace.from_samples(log.samples(run_id), info.started), profile, limits,
                      events=log.events(run_id), outcome=info.outcome)


def test_clean_run_is_met(door_log) -> None:  # noqa: ANN001
    log, clean, _ = door_log
    result = _replay(log, clean)
    print(result.as_dict())
    assert result.verdict == MET, result.reasons
    assert [s.verdict for s in result.steps] == [MET, MET, MET]


def test_door_open_spoils_the_soak(door_log) -> None:  # noqa: ANN001
    log, _, faulty = door_log
    result = _replay(log, faulty)
    soak = result.steps[1]
    print(soak.reasons, soak.figures)
    assert soak.verdict == MISSED
    assert result.verdict == MISSED


def test_door_open_reason_and_times(door_log) -> None:  # noqa: ANN001
    log, clean, faulty = door_log
    result = _replay(log, faulty)
    soak = result.steps[1]
    stretches = soak.figures["out_of_band_stretches"]
    longest = max(stretches, key=lambda s: s["seconds"])
    clean_soak = _replay(log, clean).steps[1]
    door_at = clean_soak.start_s + 600.0
    # The chamber leaves the band within a minute of the door opening and stays out for at
    # least the 5 minutes it is open (the oven then needs time to recover).
    assert abs(longest["from_s"] - door_at) < 60.0
    assert longest["seconds"] >= 300.0
    assert longest["furthest_c"] < 500.0 - 8.0
    assert any("out of the band for" in r and "the grace 2m" in r for r in soak.reasons)
    assert [a.code for a in soak.alarms] == ["hold-slipped"]
    # The engine still held 30 min at temperature (its clock stopped while out of band).
    assert soak.figures["hold_clock_s"] == pytest.approx(1800.0, abs=2.0)
    assert soak.figures["clock_out_of_band_s"] == pytest.approx(longest["seconds"], abs=5.0)


def test_band_rule_matches_the_engine(door_log) -> None:  # noqa: ANN001
    """replay.in_band with the band dwell over the logged samples agrees with the stepper's
    HOLDING/SLIPPED: the logged state changes a dwell (BAND_DWELL_S) after a stretch begins,
    and only those first seconds of a stretch may differ."""
    import numpy as np

    from tuikiln.analysis.replay import in_band, with_dwell
    from tuikiln.engine.stepper import BAND_DWELL_S

    log, _, faulty = door_log
    samples = log.samples(faulty)
    holding = samples["state"] == st.STATE_CODE[st.HOLDING]
    slipped = samples["state"] == st.STATE_CODE[st.SLIPPED]
    both = holding | slipped
    t = samples["t"][both]
    raw = np.asarray(in_band(samples["chamber_c"][both], 500.0, 8.0))
    inside = with_dwell(raw, np.r_[np.diff(t), 0.0])
    assert slipped.sum() > 200
    changes = t[np.flatnonzero(np.diff(inside)) + 1]
    for when in t[inside != holding[both]]:
        since = when - changes[changes <= when]
        assert since.size and since[-1] < BAND_DWELL_S + 1.0


def test_rules_rerun_reproduces_the_live_run(door_log) -> None:  # noqa: ANN001
    """Re-running the engine's rules over the log gives the live run's steps and alarms."""
    from tuikiln.analysis.whatif import compare_alarms

    log, _, faulty = door_log
    info = log.run(faulty)
    assert info is not None
    profile = parse_profile(info.profile_text, "stored")
    trace = Trace.from_samples(log.samples(faulty), info.started)
    logged = replay_run(trace, profile, Limits(), events=log.events(faulty),
                        outcome=info.outcome)
    rerun = replay_run(trace, profile, Limits(), events=log.events(faulty),
                       outcome=info.outcome, rerun=True)
    assert rerun.source == "rules"
    assert [s.verdict for s in rerun.steps] == [s.verdict for s in logged.steps]
    for a, b in zip(logged.steps, rerun.steps, strict=True):
        assert a.start_s == pytest.approx(b.start_s, abs=2.0)
    assert all(c.change == "fires in both" for c in compare_alarms(log.events(faulty),
                                                                    rerun.events))


# ----- the command line -----


def _cli(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    from tuikiln.cli import main

    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_replay_json(door_log, capsys) -> None:  # noqa: ANN001
    import json

    log, _, faulty = door_log
    code, out, _ = _cli(capsys, "--data", str(log.path.parent), "replay", str(faulty), "--json")
    assert code == 0
    data = json.loads(out)
    assert data["run"]["id"] == faulty
    assert data["verdict"] == MISSED
    assert [(s["index"], s["kind"], s["verdict"]) for s in data["steps"]] == [
        (0, "ramp", MET), (1, "hold", MISSED), (2, "cool", MET)]
    assert data["steps"][1]["reasons"]
    assert data["steps"][1]["out_of_band_s"] >= 300.0


def test_replay_text_last_and_bad_run(door_log, capsys) -> None:  # noqa: ANN001
    log, _, _ = door_log
    data = str(log.path.parent)
    code, out, _ = _cli(capsys, "--data", data, "replay", "last")
    assert code == 0 and "Verdict: MISSED" in out and "not a safety device" in out
    code, _, err = _cli(capsys, "--data", data, "replay", "999")
    assert code == 1 and "there is no run 999" in err and "Traceback" not in err
    code, _, err = _cli(capsys, "--data", data, "replay", "soon")
    assert code == 1 and "run id" in err


def test_whatif_thresholds(door_log, capsys) -> None:  # noqa: ANN001
    import json

    log, clean, faulty = door_log
    data = str(log.path.parent)
    # A longer grace: the door opening would raise no alarm (it lasted 7-8 min).
    code, out, _ = _cli(capsys, "--data", data, "replay", str(faulty), "--hold-grace", "15m",
                        "--json")
    assert code == 0
    whatif = json.loads(out)["whatif"]
    assert [a["change"] for a in whatif["alarms"] if a["code"] == "hold-slipped"] == [
        "would not fire"]
    # A much tighter band on the clean run: the soak slips at once.
    code, out, _ = _cli(capsys, "--data", data, "replay", str(clean), "--band", "0.2",
                        "--json")
    whatif = json.loads(out)["whatif"]
    assert any(a["change"] == "would fire" and a["code"] == "hold-slipped"
               for a in whatif["alarms"])
    code, _, err = _cli(capsys, "--data", data, "replay", str(clean), "--band", "-3")
    assert code == 1 and "--band" in err


def test_import_csv_against_profile(door_log, capsys, tmp_path) -> None:  # noqa: ANN001
    """Another tool's log (no step column): the steps are found by the engine's rules."""
    import json

    log, _, faulty = door_log
    samples = log.samples(faulty)
    rows = ["seconds,oven_F"]
    for t, c in zip(samples["t"] - START_T, samples["chamber_c"], strict=True):
        rows.append(f"{t:.0f},{c * 1.8 + 32:.2f}")
    csv_file = tmp_path / "other.csv"
    csv_file.write_text("\n".join(rows) + "\n")
    profile = tmp_path / "short.toml"
    profile.write_text(SHORT_C)
    code, out, err = _cli(capsys, "import", str(csv_file), "--against", str(profile),
                          "--time-column", "seconds", "--chamber-column", "oven_F",
                          "--units", "F", "--json")
    assert code == 0, err
    data = json.loads(out)
    assert data["source"] == "rules"
    assert [s["verdict"] for s in data["steps"]] == [MET, MISSED, MET]
    # A bad row: the file and line are named, nothing is analysed.
    rows[40] = "39,hot"
    csv_file.write_text("\n".join(rows) + "\n")
    code, out, err = _cli(capsys, "replay", "--csv", str(csv_file), "--against", str(profile),
                          "--time-column", "seconds", "--chamber-column", "oven_F")
    assert code == 1 and f"{csv_file}:41" in err and out == "" and "Traceback" not in err


KILN_DOOR = """
name = "Sim bench"
units = "C"
max = 1100

[device]
kind = "sim"

[[device.fault]]
at = "28m"
kind = "door-open"
for = "5m"
"""


def test_engine_run_with_door_fault(tmp_path: Path, kiln_file: Callable[..., Path],
                                    capsys: pytest.CaptureFixture[str]) -> None:
    """The real engine (`tuikiln run --headless --speed max`) on the simulator, door open 5 min
    ten minutes into the soak: the replay says the soak was missed, and why and when."""
    import json

    kiln, profile = kiln_file(KILN_DOOR), kiln_file(SHORT_C, "short.toml")
    data = str(tmp_path / "data")
    code, _, err = _cli(capsys, "--data", data, "--kiln", str(kiln), "run",
                        str(profile), "--headless", "--speed", "max")
    assert code == 0, err
    code, out, err = _cli(capsys, "--data", data, "replay", "last", "--json")
    assert code == 0, err
    result = json.loads(out)
    assert result["verdict"] == MISSED
    soak = result["steps"][1]
    assert soak["verdict"] == MISSED
    longest = max(soak["out_of_band_stretches"], key=lambda s: s["seconds"])
    assert abs(longest["from_s"] - 28 * 60) < 60 and longest["seconds"] >= 300
    assert "out of the band for" in soak["reasons"][0]
    assert [a["code"] for a in soak["alarms"]] == ["hold-slipped"]
    assert [s["verdict"] for s in result["steps"]] == [MET, MISSED, MET]
