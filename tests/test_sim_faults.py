"""Each scheduled fault of the simulated oven shows in the trace the way it would on a real one."""

from __future__ import annotations

from dataclasses import replace

import pytest

from tuikiln.simulator import Fault, OvenConfig, SimConfig, SimulatedKiln, parse_fault
from tuikiln.simulator.modbus_rtu import RtuResponder, crc_ok, with_crc

READ_ALL = with_crc(bytes([1, 3, 0, 0, 0, 6]))


def _kiln(*faults: Fault, **changes: object) -> SimulatedKiln:
    config = replace(SimConfig(noise_c=0.0, load_noise_c=0.0), faults=tuple(faults), **changes)
    kiln = SimulatedKiln(config)
    return kiln


def _run(kiln: SimulatedKiln, setpoint: float, until_s: float) -> None:
    kiln.set_setpoint(setpoint)
    kiln.set_running(True)
    while kiln.time_s < until_s - 1e-9:
        kiln.advance(1.0)


def test_fault_from_command_line_text() -> None:
    f = parse_fault("door-open@1h30m+45s")
    assert (f.kind, f.at_s, f.for_s) == ("door-open", 5400.0, 45.0)
    assert parse_fault("tc-open@90").at_s == 90.0
    with pytest.raises(ValueError, match='did you mean "door-open"'):
        parse_fault("door@10m")
    with pytest.raises(ValueError, match="duration"):
        parse_fault("door-open@soon")


def test_element_open_stops_heating_though_output_is_full() -> None:
    kiln = _kiln(Fault("element-open", 600.0))
    _run(kiln, 900.0, 600.0)
    at_fault = kiln.truth.chamber_c
    _run(kiln, 900.0, 1800.0)
    assert kiln.truth.chamber_c < at_fault - 20.0
    assert kiln.read().output_pct == pytest.approx(100.0)
    assert kiln.truth.heater_w == 0.0


def test_relay_welded_heats_flat_out_while_output_is_low() -> None:
    kiln = _kiln(Fault("relay-welded", 3600.0, 3600.0))
    _run(kiln, 300.0, 3600.0)
    assert kiln.truth.chamber_c == pytest.approx(300.0, abs=3.0)
    _run(kiln, 300.0, 2 * 3600.0 - 60.0)
    assert kiln.truth.chamber_c > 700.0
    assert kiln.read().output_pct == 0.0
    _run(kiln, 300.0, 6 * 3600.0)  # relay freed after an hour: the oven comes back down
    assert kiln.truth.chamber_c < 500.0


def test_tc_open_reads_over_range_sets_fault_and_cuts_output() -> None:
    kiln = _kiln(Fault("tc-open", 1200.0, 600.0))
    _run(kiln, 600.0, 1200.0)
    hot = kiln.truth.chamber_c
    kiln.advance(300.0)
    r = kiln.read()
    regs = kiln.registers()
    assert r.chamber_c is None and r.sensor_fault
    assert regs[0] == 32767 and regs[3] & 1
    assert kiln.truth.heater_w == 0.0 and kiln.truth.chamber_c < hot
    kiln.advance(400.0)
    assert kiln.read().chamber_c is not None and not kiln.read().sensor_fault


def test_tc_drift_reads_low_so_the_oven_runs_hot() -> None:
    kiln = _kiln(Fault("tc-drift", 3600.0, rate_c_per_h=-60.0))
    _run(kiln, 500.0, 3600.0)
    _run(kiln, 500.0, 2 * 3600.0)
    assert kiln.read().chamber_c == pytest.approx(500.0, abs=3.0)
    assert kiln.truth.chamber_c == pytest.approx(560.0, abs=6.0)


def test_door_open_drops_the_chamber_then_it_recovers() -> None:
    kiln = _kiln(Fault("door-open", 2 * 3600.0, 60.0))
    _run(kiln, 800.0, 2 * 3600.0)
    before = kiln.truth.chamber_c
    kiln.advance(60.0)
    # The walls stay hot (the true chamber node falls a little); the thermocouple in the
    # mixing air plunges, as on a real oven when the door opens.
    assert kiln.truth.chamber_c < before - 25.0
    assert kiln.read().chamber_c < before - 150.0
    assert kiln.read().output_pct == 100.0
    _run(kiln, 800.0, 2 * 3600.0 + 1800.0)
    assert kiln.truth.chamber_c == pytest.approx(800.0, abs=5.0)
    # The in-process call does the same.
    kiln.open_door(30.0)
    kiln.advance(30.0)
    assert kiln.read().chamber_c < 700.0


def test_link_drop_silences_the_line_for_its_duration() -> None:
    kiln = _kiln(Fault("link-drop", 100.0, 50.0))
    responder = RtuResponder(kiln)
    assert responder.reply(READ_ALL) is not None
    kiln.advance(120.0)
    assert not kiln.read().line_answers
    assert responder.reply(READ_ALL) is None
    kiln.advance(40.0)
    assert kiln.read().line_answers and crc_ok(responder.reply(READ_ALL) or b"")


def test_line_noise_garbles_about_its_share_of_replies() -> None:
    kiln = _kiln(Fault("line-noise", 0.0, share=0.5))
    assert kiln.read().garbled
    responder = RtuResponder(kiln)
    replies = [responder.reply(READ_ALL) for _ in range(400)]
    bad = sum(1 for r in replies if r is None or not crc_ok(r))
    assert 140 < bad < 260


@pytest.mark.parametrize("keep", [False, True])
def test_controller_reboot_resets_or_keeps_settings(keep: bool) -> None:
    oven = replace(OvenConfig(), keep_settings=keep)
    kiln = _kiln(Fault("controller-reboot", 1800.0, 5.0), oven=oven)
    _run(kiln, 400.0, 1802.0)
    assert not kiln.read().line_answers and kiln.truth.heater_w == 0.0
    kiln.advance(10.0)
    r = kiln.read()
    assert r.line_answers
    if keep:
        assert r.setpoint_c == 400.0 and r.running
    else:
        assert r.setpoint_c == 0.0 and not r.running
        kiln.advance(600.0)
        assert kiln.truth.heater_w == 0.0


def test_reboot_can_come_back_running_at_the_power_on_setpoint() -> None:
    oven = replace(OvenConfig(), run_at_power_on=True, power_on_setpoint_c=150.0)
    kiln = _kiln(Fault("controller-reboot", 600.0), oven=oven)
    _run(kiln, 500.0, 700.0)
    r = kiln.read()
    assert r.setpoint_c == 150.0 and r.running
