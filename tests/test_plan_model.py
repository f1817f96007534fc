"""`tuikiln plan --json` with a learned oven: predicted times against simulated runs of
profiles the model never saw, and the warnings.

Learned once per module from one ordinary run (heat as fast as it goes to 820 °C, 30 min,
free cool) on ovens unlike the demo's: 3 kW 20 l and 1 kW 2 l. Every other profile is then
run on the same simulated oven by the engine's rules (tests.test_replay_sim.simulate_run,
pauses acknowledged at once) and its length held against the prediction.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from tests.test_ovenmodel import BIG, LEARN, SMALL
from tests.test_replay_sim import START_T, simulate_run
from tuikiln.cli import main
from tuikiln.runlog import RUNLOG_NAME, RunLog
from tuikiln.simulator import OvenConfig

ROOT_PROFILES = Path(__file__).resolve().parent.parent / "profiles"

# Hardening then tempering, with a rate the big oven cannot follow at the top (900 °C/h
# above ~520 °C): the "done when" profile.
HARDEN = """
name = "harden and temper on the big oven"
units = "C"
[[step]]
ramp = "400/h"
to = 600
[[step]]
hold = "20m"
[[step]]
ramp = "900/h"
to = 950
[[step]]
hold = "15m"
[[step]]
pause = "Quench now, then acknowledge"
[[step]]
cool = "free"
to = 200
[[step]]
hold = "1h"
label = "temper"
"""

# Controlled cooling and a "max" ramp the model has to time.
SLOW_COOL = """
name = "anneal-like slow cool"
units = "C"
[[step]]
ramp = "max"
to = 760
[[step]]
hold = "40m"
[[step]]
cool = "100/h"
to = 450
[[step]]
cool = "free"
to = 250
"""

TEMPER_ONLY = """
name = "temper twice"
units = "C"
[[step]]
ramp = "max"
to = 220
[[step]]
hold = "1h"
[[step]]
cool = "free"
to = 60
[[step]]
ramp = "max"
to = 220
[[step]]
hold = "1h"
"""


def _kiln(name: str, oven: OvenConfig) -> str:
    return (f'name = "{name}"\nunits = "C"\nmax = 1200\n[device]\nkind = "sim"\n'
            f"heater_w = {oven.heater_w:g}\nchamber_litres = {oven.chamber_litres:g}\n"
            f"chamber_heat_capacity = {oven.chamber_heat_capacity_j_k:g}\n"
            f"wall_thickness_mm = {oven.wall_thickness_m * 1000:g}\n")


class Oven:
    """A data folder with the learned model of one simulated oven saved in it."""

    def __init__(self, folder: Path, name: str, config: OvenConfig) -> None:
        self.folder, self.config = folder, config
        self.kiln = folder / "kiln.toml"
        self.kiln.write_text(_kiln(name, config), encoding="utf-8")
        self.log = RunLog(folder / RUNLOG_NAME)
        learn_id = simulate_run(self.log, LEARN.format(top=820), oven=config, limit_s=60_000)
        assert self.main("learn", str(learn_id), "--save", "--json") == 0

    def main(self, *words: str) -> int:
        return main(["--data", str(self.folder), "--kiln", str(self.kiln), *words])

    def plan(self, profile: str, capsys: pytest.CaptureFixture[str]) -> dict:
        path = self.folder / "profile.toml"
        path.write_text(profile, encoding="utf-8")
        capsys.readouterr()
        assert self.main("plan", str(path), "--json") == 0
        return json.loads(capsys.readouterr().out)

    def simulated_s(self, profile: str) -> tuple[int, float, list[float]]:
        """(run id, length, each step's end) of the profile run on this oven."""
        run_id = simulate_run(self.log, profile, oven=self.config, limit_s=100_000)
        samples = self.log.samples(run_id)
        steps = samples["step"]
        ends = [float(samples["t"][steps == k][-1] - START_T) for k in range(int(steps.max()) + 1)]
        return run_id, float(samples["t"][-1] - START_T), ends


@pytest.fixture(scope="module")
def big(tmp_path_factory: pytest.TempPathFactory) -> Oven:
    return Oven(tmp_path_factory.mktemp("big"), "Big oven", BIG)


@pytest.fixture(scope="module")
def small(tmp_path_factory: pytest.TempPathFactory) -> Oven:
    return Oven(tmp_path_factory.mktemp("small"), "Small oven", SMALL)


def test_done_when_learn_once_then_predict_warn_and_judge(
        big: Oven, capsys: pytest.CaptureFixture[str]) -> None:
    planned = big.plan(HARDEN, capsys)
    run_id, actual_s, _ = big.simulated_s(HARDEN)
    predicted = planned["predicted_total_s"]
    assert predicted == pytest.approx(actual_s, rel=0.10)
    # The plain plan counts the free cool as nothing: far off, which is why the model exists.
    assert planned["total_s"] < 0.8 * actual_s
    ramp = [w for w in planned["warnings"] if w["step"] == 2]
    assert ramp and "cannot heat at 900°C/h above about" in ramp[0]["text"], planned["warnings"]
    capsys.readouterr()
    assert big.main("replay", str(run_id), "--json") == 0
    verdict = json.loads(capsys.readouterr().out)["steps"][2]
    print(f"predicted {predicted:.0f} s, simulated {actual_s:.0f} s, "
          f"error {100 * (predicted - actual_s) / actual_s:+.1f} %, "
          f"plain plan {planned['total_s']:.0f} s;", verdict["verdict"], verdict["reasons"])
    assert verdict["verdict"] != "met"


def test_the_temper_after_the_harden_is_warned(big: Oven,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    planned = big.plan(HARDEN, capsys)
    temper = [w for w in planned["warnings"] if w["step"] == 6]
    assert temper and "waits for the oven to cool from 950 °C" in temper[0]["text"]
    assert "hand-warm" in temper[0]["text"]


@pytest.mark.parametrize("profile", [SLOW_COOL, TEMPER_ONLY], ids=["slow-cool", "temper"])
@pytest.mark.parametrize("which", ["big", "small"])
def test_prediction_error_on_profiles_not_learned(
        which: str, profile: str, request: pytest.FixtureRequest,
        capsys: pytest.CaptureFixture[str]) -> None:
    oven: Oven = request.getfixturevalue(which)
    planned = oven.plan(profile, capsys)
    _, actual_s, ends = oven.simulated_s(profile)
    predicted = planned["predicted_total_s"]
    step_errors = [p["predicted_end_s"] - e for p, e in zip(planned["steps"], ends, strict=True)]
    print(which, f"predicted {predicted:.0f} s simulated {actual_s:.0f} s "
          f"({100 * (predicted - actual_s) / actual_s:+.1f} %), step ends off by "
          + ", ".join(f"{e:+.0f}" for e in step_errors))
    assert predicted == pytest.approx(actual_s, rel=0.10)
    assert max(abs(e) for e in step_errors) < 0.1 * actual_s


def test_a_cool_faster_than_free_cooling_is_warned(big: Oven,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    profile = SLOW_COOL.replace('cool = "100/h"', 'cool = "400/h"').replace(
        "to = 450", "to = 260")
    warnings = big.plan(profile, capsys)["warnings"]
    cool = [w for w in warnings if w["step"] == 2]
    assert cool and "cannot cool at 400°C/h below about" in cool[0]["text"], warnings


def test_a_target_out_of_reach_never_ends(small: Oven,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    # The small oven's settings hold about 950 °C at full output (tests/test_ovenmodel.py
    # computes its steady loss): 1100 °C is out of reach.
    profile = TEMPER_ONLY.replace("to = 220", "to = 1100", 1)
    planned = small.plan(profile, capsys)
    assert planned["predicted_total_s"] is None
    assert planned["steps"][0]["predicted_end_s"] is None
    text = [w["text"] for w in planned["warnings"] if w["step"] == 0]
    assert text and "beyond what the oven can reach" in text[0] and "never end" in text[0]


def test_without_a_model_the_plan_says_what_it_does_not_know(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "p.toml"
    path.write_text(HARDEN, encoding="utf-8")
    assert main(["--data", str(tmp_path / "empty"), "plan", str(path), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["predicted_total_s"] is None and out["model"] is None
    assert "unknown" in out["model_note"]
    assert all(s["predicted_end_s"] is None for s in out["steps"])
    # The practice warning does not need the model.
    assert [w["step"] for w in out["warnings"]] == [6]


def test_a_damaged_model_file_is_one_line(tmp_path: Path,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "p.toml"
    path.write_text(HARDEN, encoding="utf-8")
    broken = tmp_path / "model.json"
    broken.write_text("{not json", encoding="utf-8")
    assert main(["--data", str(tmp_path), "plan", str(path), "--model", str(broken)]) == 1
    err = capsys.readouterr().err.strip()
    assert "model.json: not JSON" in err and "\n" not in err


def test_the_live_eta_uses_the_model(big: Oven) -> None:
    # The status's time to the end, taken as the engine would give it, against the time
    # the run really took from there on. The plain plan counts "max" ramps and the free
    # cool as nothing; the model counts what this oven does.
    from tuikiln.engine.status import remaining_plan_s
    from tuikiln.limits import Limits
    from tuikiln.ovenmodel_store import live_forecast
    from tuikiln.profile import parse_profile

    profile = parse_profile(HARDEN)
    forecast = live_forecast(big.folder, "Big oven", profile, Limits())
    assert forecast is not None
    seen: dict[int, tuple[float, float | None, float | None]] = {}

    def note(t: float, rules) -> None:  # noqa: ANN001
        index = rules.stepper.index
        if index not in seen and index < len(profile.steps):
            seen[index] = (t, remaining_plan_s(rules, forecast)[2], remaining_plan_s(rules)[2])

    run_id = simulate_run(big.log, HARDEN, oven=big.config, limit_s=100_000, on_tick=note)
    samples = big.log.samples(run_id)
    end = float(samples["t"][-1] - START_T)
    for index in (2, 5):  # the ramp the oven cannot follow, the free cool after the quench
        t, with_model, plain = seen[index]
        actual = end - t
        print(index, f"actual {actual:.0f} s, model {with_model} s, plain {plain} s")
        assert with_model == pytest.approx(actual, rel=0.10)
        assert plain is None or plain < 0.8 * actual  # None: "cannot be told"


def test_the_temper_warning_sees_through_a_load_pause(big: Oven,
                                                      capsys: pytest.CaptureFixture[str]) -> None:
    # The shipped A2 profile takes the parts out at the quench and asks for them back once
    # the oven is at the temper: they wait out of the oven while it cools from 1750 °F.
    planned = big.plan((ROOT_PROFILES / "a2-harden-temper.toml").read_text(), capsys)
    temper = [w for w in planned["warnings"] if "waits for the oven to cool" in w["text"]]
    assert [w["step"] for w in temper] == [7], planned["warnings"]
    assert "from 1750 °F" in temper[0]["text"]
