"""Modbus reads per second through drivers.modbus over a pty with 9600-baud wire time.

    python tests/bench/modbus_rate.py [--quick] [--json]

A 2-register read is an 8-byte request and a 9-byte reply; with the 3.5-character silence
before each frame (Modbus over Serial Line V1.02, s. 2.5.1.1) that is 24 characters of 10
bits (8N1) = 25 ms at 9600 baud: the link allows about 40 reads/s. Target: the driver
reaches at least 80 % of that, i.e. it adds little of its own between exchanges.

Two servers: a pymodbus RTU server behind an in-process relay that emulates the wire time
(tests/test_drivers_wire.py), and, where present, `tuikiln sim serve --pty`, which
emulates the wire time itself.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from tuikiln.drivers.maps import parse_map  # noqa: E402
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings  # noqa: E402

BAUD = 9600
REQUEST_BYTES, REPLY_BYTES, GAP_CHARS = 8, 9, 3.5
LINK_LIMIT = BAUD / 10.0 / (REQUEST_BYTES + REPLY_BYTES + 2 * GAP_CHARS)
TARGET_SHARE = 0.8

TWO_REGISTERS = """
name = "bench"
[read]
chamber = { fc = 3, address = 0, scale = 0.1, signed = true, units = "C" }
setpoint = { fc = 3, address = 1, scale = 0.1, signed = true, units = "C" }
"""


async def _rate(port: str, seconds: float) -> float:
    device = ModbusDevice(ModbusSettings(port=port, timeout_s=1.0, retries=1),
                          parse_map(TWO_REGISTERS, "bench.toml"))
    async with device:
        for _ in range(3):  # warm up
            await device.read()
        count = 0
        start = time.perf_counter()
        while time.perf_counter() - start < seconds:
            await device.read()
            count += 1
        return count / (time.perf_counter() - start)


async def _via_relay(seconds: float) -> float:
    from tests.test_drivers_wire import PtyWire, holding_device, start_serial_server

    with tempfile.TemporaryDirectory() as folder:
        wire = PtyWire(f"{folder}/ttyBENCH", baud=BAUD)
        server = await start_serial_server(holding_device([8523, 8500, 0, 0]),
                                           wire.device_path)
        try:
            return await _rate(wire.link_path, seconds)
        finally:
            await server.shutdown()
            wire.close()


def _via_sim_serve(seconds: float) -> float | None:
    try:
        import tuikiln.commands.sim  # noqa: F401
    except ImportError:
        return None
    proc = subprocess.Popen(
        [sys.executable, "-m", "tuikiln", "sim", "serve", "--pty", "--baud", str(BAUD)],
        stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, cwd=ROOT)
    try:
        assert proc.stdout is not None
        path = proc.stdout.readline().strip()
        return asyncio.run(_rate(path, seconds))
    finally:
        proc.kill()
        proc.wait(5)


def _figure(value: float) -> dict[str, object]:
    return {"value": round(value, 1), "unit": "reads/s",
            "target": f">= {TARGET_SHARE * LINK_LIMIT:.1f} (80 % of {LINK_LIMIT:.1f})",
            "ok": value >= TARGET_SHARE * LINK_LIMIT}


def run(quick: bool) -> dict[str, dict]:
    seconds = 1.5 if quick else 5.0
    relay = asyncio.run(_via_relay(seconds))
    results: dict[str, dict] = {
        "modbus 2-register reads, pymodbus server, 9600 baud wire": _figure(relay),
        "share of the 9600-baud link limit": {
            "value": round(100.0 * relay / LINK_LIMIT, 1), "unit": "%", "target": ">= 80",
            "ok": relay / LINK_LIMIT >= TARGET_SHARE,
        },
    }
    served = _via_sim_serve(seconds)
    if served is not None:
        results["modbus 2-register reads, tuikiln sim serve --pty"] = _figure(served)
    return results


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="shorter runs")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    args = parser.parse_args()
    results = run(args.quick)
    if args.json:
        print(json.dumps(results, indent=2))
    else:
        for name, fig in results.items():
            mark = "ok" if fig["ok"] else "LOW"
            print(f"{name:58s} {fig['value']:>7} {fig['unit']:8s} {fig['target']:28s} {mark}")
    return 0 if all(fig["ok"] for fig in results.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
