"""The setpoint write guard, and the scripted fake device."""

from __future__ import annotations

import pytest

from tuikiln.drivers.errors import LinkLost, NotSupported
from tuikiln.drivers.fake import FirstOrderOven, ScriptedDevice
from tuikiln.drivers.guard import SetpointGuard


def test_slow_ramp_does_not_write_every_poll() -> None:
    guard = SetpointGuard(resolution_c=0.1, min_interval_s=10.0, safe_c=0.0)
    writes = []
    # 1 °C/h polled every 2 s for an hour: the value moves 1/1800 °C per poll
    for poll in range(1800):
        now = poll * 2.0
        target = 500.0 + now / 3600.0
        if guard.request(target, now):
            guard.written(target, now)
            writes.append(now)
    # 0.1 °C resolution over 1 °C: about ten writes, not 1800
    assert 8 <= len(writes) <= 12
    assert all(b - a >= 10.0 for a, b in zip(writes, writes[1:], strict=False))


def test_fast_ramp_is_limited_by_the_interval() -> None:
    guard = SetpointGuard(resolution_c=0.1, min_interval_s=10.0)
    count = 0
    for poll in range(300):  # 600 s at 300 °C/h, polled every 2 s
        now = poll * 2.0
        if guard.request(20 + now / 12.0, now):
            guard.written(20 + now / 12.0, now)
            count += 1
    assert count == 60  # once per 10 s


def test_drop_to_safe_setpoint_is_written_at_once() -> None:
    guard = SetpointGuard(resolution_c=0.1, min_interval_s=10.0, safe_c=0.0)
    assert guard.request(800.0, 0.0)
    guard.written(800.0, 0.0)
    assert not guard.request(790.0, 1.0)  # ordinary change: waits for the interval
    assert guard.request(0.0, 1.5)  # safety: no waiting
    guard.written(0.0, 1.5)
    assert not guard.request(0.0, 2.0)  # already there


async def test_scripted_device_follows_script_and_raises_on_cue() -> None:
    dev = ScriptedDevice([20.0, 30.0, None], errors={1: LinkLost("unplugged")})
    async with dev:
        assert (await dev.read()).chamber_c == 20.0
        with pytest.raises(LinkLost):
            await dev.read()
        third = await dev.read()
        assert third.chamber_c is None and third.sensor_fault
        assert (await dev.read()).chamber_c is None  # the last item repeats
        await dev.write_setpoint(100.0)
        await dev.stop_heating()
    assert dev.setpoint_writes == [(0.0, 100.0)] and dev.stop_calls == [0.0]
    assert dev.closed


async def test_scripted_oven_model_follows_first_order_law() -> None:
    oven = FirstOrderOven(room_c=20.0, tau_s=600.0, temperature_c=20.0)
    dev = ScriptedDevice(model=oven)
    await dev.write_setpoint(820.0)
    await dev.clock.sleep(600.0)
    # first-order step response: 1 - e^-1 = 63.2 % of the step after one time constant
    assert (await dev.read()).chamber_c == pytest.approx(20 + 800 * 0.6321, abs=0.1)
    await dev.stop_heating()
    await dev.clock.sleep(6000.0)
    assert (await dev.read()).chamber_c == pytest.approx(20.0, abs=1.0)


async def test_monitor_only_fake_refuses_setpoints() -> None:
    from tuikiln.drivers.base import Capabilities

    dev = ScriptedDevice([25.0], capabilities=Capabilities(False, False))
    with pytest.raises(NotSupported):
        await dev.write_setpoint(100.0)
