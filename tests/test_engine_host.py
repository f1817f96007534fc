"""tuikiln/engine/host.py: what a kiln file makes of a run engine's settings and safety paths
(the background run and the demo both build their engines there)."""

from __future__ import annotations

from tuikiln.engine.host import safety_for, settings_for
from tuikiln.engine.safety import DEFAULT_SAFETY, drive_safe
from tuikiln.kiln import parse_kiln
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile

KILN = '''name = "Host oven"
units = "C"
max = 1000
[alarms]
band = 20
overshoot = 30
[device]
kind = "sim"
'''

PROFILE = '''name = "p"
units = "C"
[limits]
band = 10
[[step]]
ramp = "max"
to = 200
'''


def test_the_settings_carry_the_kiln_and_the_limits_profile_over_kiln_over_defaults(tmp_path):
    kiln = parse_kiln(KILN, str(tmp_path / "kiln.toml"))
    profile = parse_profile(PROFILE, "p.toml", max_c=kiln.max_c)
    settings = settings_for(kiln, profile, tick_s=2.0, start_index=0, speed="60",
                            auto_continue=True)
    assert (settings.kiln.name, settings.kiln.units, settings.kiln.max_c) == (
        "Host oven", "C", 1000.0)
    assert settings.kiln.text == KILN  # stored with the run as written
    assert settings.limits.band == 10.0       # the profile's [limits] wins
    assert settings.limits.overshoot == 30.0  # the kiln's [alarms] over the default
    assert settings.limits.runaway == Limits().runaway
    assert (settings.tick_s, settings.speed, settings.auto_continue) == (2.0, "60", True)


def test_the_simulator_gets_the_watchdog_and_no_second_connection(tmp_path):
    kiln = parse_kiln(KILN, str(tmp_path / "kiln.toml"))
    assert safety_for(kiln) is DEFAULT_SAFETY
    assert DEFAULT_SAFETY.watchdog_s == 30.0 and DEFAULT_SAFETY.second_connection is None


async def test_a_real_controller_gets_a_second_connection_that_stops_its_heat(tmp_path):
    # `sim serve` in its own process, over Modbus, as a real controller would be.
    from tests.crash_trials import TrialSim
    from tuikiln.drivers.factory import open_device

    sim = TrialSim(1.0)
    try:
        kiln = parse_kiln(f'name = "Served"\nunits = "C"\nmax = 1100\n[device]\n'
                          f'kind = "modbus"\nport = "tcp://127.0.0.1:{sim.port}"\nmap = "sim"\n'
                          'timeout = 0.5\n', str(tmp_path / "kiln.toml"))
        first = open_device(kiln.device, kiln.base_dir)
        async with first:
            await first.write_setpoint(300.0)  # the driver writes "run" with it
        assert sim.registers()[4] == 1
        wiring = safety_for(kiln)
        assert wiring.second_connection is not None
        spare = wiring.second_connection()
        assert spare is not first and spare.description == first.description
        async with spare:
            result = await drive_safe(spare)
        assert result.done, result.words
        assert sim.registers()[4] == 0  # the controller's run state: off
    finally:
        sim.stop()
