"""Line thermometers on real pseudo-terminals: every line form, millivolts with cold-junction
compensation, bad lines survived, and a port that vanishes and comes back."""

from __future__ import annotations

import asyncio
import os
import tty

import pytest

from tests.waiting import eventually, time_passes
from tuikiln.drivers.base import Reading
from tuikiln.drivers.errors import BadReply, LinkLost, NoAnswer, NotSupported
from tuikiln.drivers.lines import ChannelSpec, LineSettings, LineThermometer


class FakeMeter:
    """The meter's end of the cable: a pty master; the driver opens `path` (a symlink)."""

    def __init__(self, path: str) -> None:
        self.path = path
        self.master = self.slave = -1
        self.plug()

    def plug(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        if os.path.lexists(self.path):
            os.unlink(self.path)
        os.symlink(os.ttyname(self.slave), self.path)

    def send(self, *lines: str) -> None:
        os.write(self.master, "".join(line + "\r\n" for line in lines).encode())

    def unplug(self) -> None:
        os.close(self.master)
        os.close(self.slave)
        os.unlink(self.path)
        self.master = -1

    def close(self) -> None:
        if self.master >= 0:
            self.unplug()


@pytest.fixture
def meter(tmp_path):
    m = FakeMeter(str(tmp_path / "ttyMETER"))
    yield m
    m.close()


def make(meter: FakeMeter, fmt: str, *channels: ChannelSpec, **kw: object) -> LineThermometer:
    settings = LineSettings(port=meter.path, format=fmt, channels=channels, timeout_s=0.5,
                            reconnect_min_s=0.05, reconnect_max_s=0.1, **kw)  # type: ignore[arg-type]
    return LineThermometer(settings)


async def test_regex_lines(meter) -> None:
    dev = make(meter, "regex", ChannelSpec("chamber", "t"), ChannelSpec("load", "u", unit="F"),
               pattern=r"T1\s+(?P<t>\S+)\s+T2\s+(?P<u>\S+)")
    async with dev:
        meter.send("T1 852.3 T2 1562.0")
        reading = await dev.read()
    assert reading.chamber_c == pytest.approx(852.3)
    assert reading.load_c == pytest.approx(850.0)  # (1562 - 32) * 5/9, definition of °F
    assert not dev.capabilities.can_write_setpoint


async def test_keyvalue_lines_and_open_thermocouple(meter) -> None:
    dev = make(meter, "keyvalue", ChannelSpec("chamber", "T1"), ChannelSpec("roof", "T3"))
    async with dev:
        meter.send("T1=800.5C, T3=640.25")
        reading = await dev.read()
        assert reading.chamber_c == pytest.approx(800.5)
        assert reading.channels == {"roof": pytest.approx(640.25)}
        meter.send("T1=OPEN T3=641")
        reading = await dev.read()
        assert reading.chamber_c is None and reading.sensor_fault


async def test_csv_by_header_and_by_index(meter) -> None:
    dev = make(meter, "csv", ChannelSpec("chamber", "oven"), ChannelSpec("load", 2),
               header=True)
    async with dev:
        meter.send("time,oven,part", "12:00:01,845.0,790.5")
        reading = await dev.read()
    assert (reading.chamber_c, reading.load_c) == (845.0, 790.5)


async def test_json_lines_and_bad_lines_are_counted_not_fatal(meter) -> None:
    dev = make(meter, "json", ChannelSpec("chamber", "c"))
    async with dev:
        meter.send('{"c": 1', "garbage \x07\xff", '{"c": "x"}', '{"c": 901.5}')
        reading = await dev.read()
        assert reading.chamber_c == 901.5
        assert dev.bad_lines == 3 and dev.good_lines == 1
        meter.send("still garbage")
        with pytest.raises(BadReply) as caught:
            await dev.read()
        assert "could not be read" in str(caught.value)
        with pytest.raises(NoAnswer):
            await dev.read()
        with pytest.raises(NotSupported):
            await dev.stop_heating()


async def test_millivolts_with_cold_junction_against_nist_table(meter) -> None:
    dev = make(
        meter, "csv",
        ChannelSpec("chamber", 0, unit="mV", thermocouple="K", cold_junction_c=0.0),
        ChannelSpec("load", 1, unit="mV", thermocouple="K", cold_junction_field=2),
        ChannelSpec("rim", 3, unit="mV", thermocouple="K", cold_junction_c=25.0),
    )
    async with dev:
        # NIST Monograph 175 / ITS-90 table, type K: 1000 °C = 41.276 mV, 500 °C = 20.644 mV,
        # 25 °C = 1.000 mV (reference junction 0 °C; table values from memory, the first
        # given in the task). A meter whose terminals are at 25 °C sees emf(T) - emf(25 °C).
        meter.send("41.276,19.644,25.0,40.276")
        reading = await dev.read()
    assert reading.chamber_c == pytest.approx(1000.0, abs=0.05)
    assert reading.load_c == pytest.approx(500.0, abs=0.05)
    assert reading.channels["rim"] == pytest.approx(1000.0, abs=0.05)


async def test_unplug_link_lost_then_recovers_without_blocking(meter) -> None:
    dev = make(meter, "keyvalue", ChannelSpec("chamber", "T"))
    ticks = 0

    async def ticker() -> None:
        nonlocal ticks
        while True:
            ticks += 1
            await time_passes(0.01, "a ticker's period: it counts while the loop runs")

    task = asyncio.create_task(ticker())
    async with dev:
        meter.send("T=700")
        assert (await dev.read()).chamber_c == 700.0
        meter.unplug()
        with pytest.raises(LinkLost):
            await dev.read()
        with pytest.raises(LinkLost):
            await dev.read()  # still gone: says so at once (backoff), no crash
        meter.plug()

        async def answered() -> Reading | None:
            try:
                meter.send("T=705")
                return await dev.read()
            except (LinkLost, NoAnswer):
                return None

        reading = await eventually(answered, what="a reading once plugged in again")
        assert reading.chamber_c == 705.0
        assert dev.reconnects == 1
    task.cancel()
    assert ticks >= 3
