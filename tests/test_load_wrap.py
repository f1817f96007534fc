"""A foil-wrapped load: the profile's `[load] wrap`, the simulator's `[device.load] wrap`, and
the foil skin in the simulator's heat network."""

from __future__ import annotations

import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import pytest

from tuikiln.errors import FileProblems
from tuikiln.profile import parse_profile
from tuikiln.simulator import LoadConfig, SimConfig, SimulatedKiln, check_sim_settings
from tuikiln.simulator.physics import air_conductivity_w_mk

STEPS = """
[[step]]
ramp = "max"
to = 1010
[[step]]
hold = "20m"
start = "equalized"
"""


def profile_text(load: str) -> str:
    return f'name = "A2 in foil"\nunits = "C"\n[load]\n{load}\n{STEPS}'


def problems(text: str) -> list[tuple[int | None, str]]:
    with pytest.raises(FileProblems) as caught:
        parse_profile(text, "a2.toml")
    return [(p.line, p.message) for p in caught.value.problems]


def test_wrap_defaults_to_none_and_foil_is_kept() -> None:
    assert parse_profile(profile_text('thickness = "6 mm"'), "a2.toml").load.wrap == "none"
    profile = parse_profile(profile_text('thickness = "6 mm"\nwrap = "foil"'), "a2.toml")
    assert profile.load.wrap == "foil"


def test_a_misspelt_wrap_names_the_line_and_the_choice() -> None:
    got = problems(profile_text('material = "A2"\nwrap = "foi"'))
    assert got == [(5, '"wrap" must be "none" or "foil", not "foi" (did you mean "foil"?)')]
    got = problems(profile_text("wrap = true"))
    assert got == [(4, '"wrap" must be "none" or "foil", not that')]
    got = problems(profile_text('wrapping = "foil"'))
    assert got[0][0] == 4 and 'unknown key "wrapping"' in got[0][1] and '"wrap"' in got[0][1]


def test_check_command_says_it_in_one_line(tmp_path: Path) -> None:
    path = tmp_path / "a2.toml"
    path.write_text(profile_text('wrap = "paper"'), encoding="utf-8")
    done = subprocess.run([sys.executable, "-m", "tuikiln", "check", str(path)],
                          capture_output=True, text=True, timeout=60)
    assert done.returncode != 0
    assert f'{path}:4: "wrap" must be "none" or "foil", not "paper"' in done.stderr + done.stdout
    assert "Traceback" not in done.stderr


def test_simulator_load_wrap_is_checked_like_its_other_keys() -> None:
    config, found = check_sim_settings({"device": {"load": {"wrap": "foil", "foil_gap_mm": 2,
                                                             "foil_emissivity": 0.2}}})
    assert found == [] and config is not None and config.load is not None
    assert config.load.wrap == "foil" and config.load.foil_gap_m == pytest.approx(0.002)
    assert config.load.foil_emissivity == pytest.approx(0.2)
    _, found = check_sim_settings({"device": {"load": {"wrap": "fiol"}}})
    assert found == [(("device", "load", "wrap"), 'unknown wrap "fiol" (did you mean "foil"?)')]
    _, found = check_sim_settings({"device": {"load": {"foil_gap_mm": -1}}})
    assert found and found[0][0] == ("device", "load", "foil_gap_mm")


def test_air_conductivity_fit_is_near_the_table() -> None:
    # Incropera Table A.4, air at 1 atm (from memory): 0.0263 at 300 K, 0.0573 at 800 K,
    # 0.0763 at 1200 K, in W/(m K).
    for kelvin, k in ((300.0, 0.0263), (800.0, 0.0573), (1200.0, 0.0763)):
        assert air_conductivity_w_mk(kelvin) == pytest.approx(k, rel=0.05)


def _heat(wrap: str, seconds: float, **load: float) -> SimulatedKiln:
    config = replace(SimConfig(), load=LoadConfig(thickness_m=0.006, wrap=wrap, **load),
                     speed=None)
    kiln = SimulatedKiln(config, seed=0)
    kiln.set_running(True)
    kiln.set_setpoint(1000.0)
    kiln.advance(seconds)
    return kiln


def test_foil_slows_the_plate_and_energy_is_kept() -> None:
    bare, foil = _heat("none", 1200.0), _heat("foil", 1200.0)
    b, f = bare.truth, foil.truth
    assert b.load_core_c is not None and f.load_core_c is not None
    # Same oven, same chamber path to within a few degrees, the wrapped plate far behind.
    assert abs(b.chamber_c - f.chamber_c) < 15.0
    assert f.load_core_c < b.load_core_c - 100.0
    # The foil sits between the chamber and the plate's surface, which the thermocouple sees.
    foil_c = foil.physics.foil_c
    assert foil_c is not None and f.load_surface_c is not None
    assert f.chamber_c > foil_c > f.load_surface_c >= f.load_core_c
    assert foil.read().load_c == pytest.approx(f.load_surface_c, abs=3.0)
    # Backward Euler on a conductance network conserves energy exactly (to rounding).
    p = foil.physics
    assert p.energy_in_j - p.energy_lost_j == pytest.approx(p.stored_energy_j(), rel=1e-9)


def test_a_wider_air_gap_is_slower() -> None:
    snug = _heat("foil", 1200.0, foil_gap_m=0.0005).truth.load_core_c
    loose = _heat("foil", 1200.0, foil_gap_m=0.003).truth.load_core_c
    assert snug is not None and loose is not None and loose < snug - 20.0


def test_width_is_read_like_the_thickness() -> None:
    profile = parse_profile(profile_text('thickness = "40 mm"\nwidth = "2 in"'), "a2.toml")
    assert profile.load.width_m == pytest.approx(0.0508)
    got = problems(profile_text('width = "wide"'))
    assert got == [(4, '"width": "wide" is not a width such as "4 mm" or "0.16 in"')]


def foil_run() -> str:
    """The engine tests' short profile (heat, equalized hold, two cools) on a foil packet."""
    from tests.test_engine_sim import SHORT

    load = '[load]\nmaterial = "AISI A2"\nthickness = "6 mm"\nwidth = "50 mm"\nwrap = "foil"\n'
    return SHORT.replace('units = "C"\n', 'units = "C"\n' + load, 1)


async def test_a_foil_run_on_the_simulator_records_the_wrap(tmp_path: Path) -> None:
    # The whole engine on the simulator's foil packet with no load thermocouple: the run
    # completes, the record keeps the wrap and width, and the estimated core is logged
    # through the hold and the cool.
    from tests.test_engine_sim import simulate

    outcome, _, engine, _, log = await simulate(
        tmp_path, foil_run(),
        faults='[device.load]\nwrap = "foil"\nthermocouple = false\n')
    assert outcome == "completed"
    info = log.runs()[-1]
    assert info.load is not None
    assert info.load["wrap"] == "foil" and info.load["width"] == "50 mm"
    samples = log.samples(info.id)
    core, chamber = samples["core_c"], samples["chamber_c"]
    logged = core == core
    assert logged.sum() > 100
    cooling = logged & (samples["step"] >= 2) & (chamber < core)
    assert cooling.sum() > 10
