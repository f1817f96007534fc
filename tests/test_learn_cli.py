"""`tuikiln learn` on runs the engine's rules logged from the simulator (a real SQLite run
log), and `tuikiln plan` with what it learned.

The oven is a 3 kW, 20 l one, unlike the demo's 1.8 kW, 4.5 l bench oven. PID settings are
recomputed here from the SIMC formulas as printed in Skogestad 2003 (J. Process Control 13,
291-309) from the model's own first-order-plus-dead-time figures.
"""

from __future__ import annotations

import json
import stat
from pathlib import Path

import numpy as np
import pytest

from tests.test_ovenmodel import BIG, LEARN
from tests.test_replay_sim import simulate_run
from tuikiln.cli import main
from tuikiln.runlog import RUNLOG_NAME, RunLog

KILN = """
name = "Big test oven"
units = "C"
max = 1200
[device]
kind = "sim"
heater_w = 3000
chamber_litres = 20
chamber_heat_capacity = 6000
"""

NO_COOL = """
name = "heat and hold, no cool"
units = "C"
[[step]]
ramp = "max"
to = 500
[[step]]
hold = "20m"
"""


@pytest.fixture(scope="module")
def data(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A data folder with an ordinary run (1), a run that never cools (2), a second ordinary
    run hotter (3), and the kiln file."""
    folder = tmp_path_factory.mktemp("learn")
    log = RunLog(folder / RUNLOG_NAME)
    simulate_run(log, LEARN.format(top=820), oven=BIG, limit_s=60_000.0)
    simulate_run(log, NO_COOL, oven=BIG, limit_s=60_000.0)
    simulate_run(log, LEARN.format(top=950), oven=BIG, limit_s=60_000.0)
    log.close()
    (folder / "kiln.toml").write_text(KILN, encoding="utf-8")
    return folder


def _main(data: Path, *words: str) -> int:
    return main(["--data", str(data), "--kiln", str(data / "kiln.toml"), *words])


def _json(data: Path, capsys: pytest.CaptureFixture[str], *words: str) -> dict:
    assert _main(data, *words) == 0
    return json.loads(capsys.readouterr().out)


def test_learn_json_has_the_model_and_simc_gains(data: Path,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    out = _json(data, capsys, "learn", "1", "--json")
    assert set(out["pid"]) == {"kp", "ti_s", "td_s"}
    model = out["model"]
    k, tau, theta = model["gain_c_per_pct"], model["tau_s"], model["dead_time_s"]
    # SIMC (Skogestad 2003): tau_c = theta; the engine logs once a second, which adds half a
    # second of effective delay (the rule for sampled control, applied in tuikiln.simc).
    theta_eff = theta + 0.5
    assert out["pid"]["kp"] == pytest.approx(tau / (k * 2 * theta_eff), rel=2e-3)
    assert out["pid"]["ti_s"] == pytest.approx(min(tau, 4 * 2 * theta_eff), abs=0.1)
    assert out["pid"]["td_s"] == 0.0
    assert out["saved"] is None
    assert 1150.0 < model["top_c"] < 1350.0  # the settings give 1260 °C (test_ovenmodel)
    assert model["valid_to_c"] == pytest.approx(821.0, abs=5.0)


def test_learn_says_it_in_words(data: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert _main(data, "learn", "1") == 0
    text = capsys.readouterr().out
    assert "highest it can hold: about" in text
    assert "PID by SIMC (Skogestad 2003)" in text
    assert 'Not saved: add --save to keep it for "Big test oven"' in text


def test_save_is_private_and_a_second_run_refines(data: Path, tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    # A data folder of its own for the saved model (the run log stays the module's).
    first = _json(data, capsys, "learn", "1", "--json", "--save")
    saved = Path(first["saved"])
    try:
        assert saved.name == "big-test-oven.json"
        assert stat.S_IMODE(saved.stat().st_mode) == 0o600
        assert stat.S_IMODE(saved.parent.stat().st_mode) == 0o700
        assert first["model"]["runs"] == 1
        again = _json(data, capsys, "learn", "1", "--json", "--save")
        assert again["model"]["runs"] == 1  # the same run is not counted twice
        second = _json(data, capsys, "learn", "3", "--json", "--save")
        assert second["model"]["runs"] == 2
        assert second["this_run"]["valid_to_c"] > first["model"]["valid_to_c"]
        assert second["model"]["valid_to_c"] == second["this_run"]["valid_to_c"]
        assert second["model"]["seconds"] > first["model"]["seconds"]
        assert not list(saved.parent.glob(".model-*"))  # no temporary file left behind
    finally:
        saved.unlink()


def test_a_run_without_cooling_is_refused_in_one_line(data: Path,
                                                      capsys: pytest.CaptureFixture[str]) -> None:
    assert _main(data, "learn", "2") == 1
    err = capsys.readouterr().err.strip()
    assert "run 2: the run has no cooling" in err and "\n" not in err


def test_unknown_run_and_csv_without_output(data: Path, tmp_path: Path,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    assert _main(data, "learn", "99") == 1
    assert "there is no run 99" in capsys.readouterr().err
    csv = tmp_path / "log.csv"
    csv.write_text("time,chamber\n" + "".join(f"{i},{20 + i}\n" for i in range(100)))
    assert _main(data, "learn", str(csv)) == 1
    err = capsys.readouterr().err.strip()
    assert "no heater output column" in err and "\n" not in err


def test_learn_from_the_exported_csv_matches_the_run(data: Path, tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    from_log = _json(data, capsys, "learn", "1", "--json")["model"]
    csv = tmp_path / "run1.csv"
    assert _main(data, "export", "1", "--csv", "-o", str(csv)) == 0
    capsys.readouterr()
    from_csv = _json(data, capsys, "learn", str(csv), "--json")["model"]
    for key in ("heat_c_per_s", "top_c", "holding_output_pct"):
        assert from_csv[key] == pytest.approx(from_log[key], rel=0.02), key


def test_fahrenheit_csv_keeps_the_output_as_percent(tmp_path: Path, data: Path,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    log = RunLog(data / RUNLOG_NAME)
    samples = log.samples(1)
    log.close()
    csv = tmp_path / "f.csv"
    rows = [f"{t - samples['t'][0]:.0f},{c * 9 / 5 + 32:.2f},{u:.1f}"
            for t, c, u in zip(samples["t"], samples["chamber_c"], samples["output_pct"],
                               strict=True) if np.isfinite(c)]
    csv.write_text("time,temp (F),output\n" + "\n".join(rows) + "\n")
    celsius = _json(data, capsys, "learn", "1", "--json")["model"]
    fahrenheit = _json(data, capsys, "learn", str(csv), "--json")["model"]
    assert fahrenheit["holding_output_pct"] == pytest.approx(celsius["holding_output_pct"],
                                                             rel=0.03)


def test_help_is_printed(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as done:
        main(["learn", "--help"])
    assert done.value.code == 0
    assert "--output-column" in capsys.readouterr().out
