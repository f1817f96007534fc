"""`tuikiln probe`: connect to the kiln's device and print a few readings.

For checking wiring, port settings and the register map before the first run. It only
reads: it never writes a setpoint or switches the heat. `--scan` reads raw ranges of
registers or coils instead, to help write a map (tuikiln/commands/probe_scan.py).
"""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
import time
from typing import Any

from tuikiln.drivers.base import Device, Reading
from tuikiln.drivers.errors import BadReply, DeviceError, LinkLost, NoAnswer, SettingsError
from tuikiln.errors import UserError
from tuikiln.units import Units, format_temp

# Readings outside this band mean the map's scale or decimal places are wrong, not the
# oven (a heat-treat oven runs between room temperature and about 1300 °C; common
# practice, no source).
PLAUSIBLE_C = (-60.0, 1900.0)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--count", type=int, default=5, metavar="N",
                        help="how many readings to take (default 5; 0: until Ctrl-C)")
    parser.add_argument("--every", type=float, metavar="SECONDS",
                        help="seconds between readings (default: the kiln file's poll)")
    parser.add_argument("--json", action="store_true",
                        help="one JSON object per reading (temperatures in °C)")
    parser.add_argument("--scan", action="append", default=[], metavar="FC:FIRST-LAST",
                        help="read raw coils (1), discrete inputs (2), holding (3) or input "
                        "(4) registers FIRST..LAST --count times and show which change, to "
                        "help write a map (repeatable; the kiln file's map is not used)")


def _load(path: str | None) -> tuple[dict[str, Any], str, Units]:
    """The kiln file's [device] table, its folder, and the display units."""
    from tuikiln.kiln import load_kiln

    kiln = load_kiln(path)
    return dict(kiln.device), kiln.base_dir, kiln.units


def reading_json(reading: Reading) -> str:
    record: dict[str, Any] = {
        "time": round(reading.time, 3),
        "chamber": reading.chamber_c,
        "setpoint": reading.setpoint_c,
        "load": reading.load_c,
        "output": reading.output_pct,
        "sensor_fault": reading.sensor_fault,
        "running": reading.running,
    }
    if reading.channels:
        record["channels"] = dict(reading.channels)
    if reading.status:
        record["status"] = dict(reading.status)
    return json.dumps(record)


def reading_line(reading: Reading, units: Units) -> str:
    stamp = time.strftime("%H:%M:%S", time.localtime(reading.time))
    parts = [stamp, f"chamber {format_temp(reading.chamber_c, units, 1)}"]
    if reading.load_c is not None:
        parts.append(f"load {format_temp(reading.load_c, units, 1)}")
    if reading.setpoint_c is not None:
        parts.append(f"setpoint {format_temp(reading.setpoint_c, units, 1)}")
    if reading.output_pct is not None:
        parts.append(f"output {reading.output_pct:.1f} %")
    if reading.running is not None:
        parts.append("running" if reading.running else "stopped")
    for name, value in reading.channels.items():
        parts.append(f"{name} {format_temp(value, units, 1)}")
    for name, on in reading.status.items():
        if on:
            parts.append(name)
    if reading.sensor_fault:
        parts.append("SENSOR FAULT (thermocouple open or out of range)")
    return "  ".join(parts)


def _absurd(reading: Reading) -> str | None:
    lo, hi = PLAUSIBLE_C
    for name, value in (("chamber", reading.chamber_c), ("load", reading.load_c),
                        ("setpoint", reading.setpoint_c)):
        if value is not None and not lo <= value <= hi:
            return f"{name} reads {value:g} °C"
    if reading.output_pct is not None and not -1.0 <= reading.output_pct <= 101.0:
        return f"output reads {reading.output_pct:g} %"
    return None


def _user_error(exc: DeviceError, device: Device | None) -> UserError:
    where = f" ({device.description})" if device is not None else ""
    text = f"{exc}{where}"
    if exc.hint:
        text += f"\n  try: {exc.hint}"
    return UserError(text)


async def _probe(args: argparse.Namespace, out: Any) -> int:
    from tuikiln.drivers.factory import open_device

    scans = []
    if args.scan:
        from tuikiln.commands.probe_scan import parse_scan

        scans = [parse_scan(text) for text in args.scan]
        if args.count < 1:
            raise UserError(f"--scan needs --count 1 or more, not {args.count}")
    table, base_dir, units = _load(args.kiln)
    try:
        device = open_device(table, base_dir)
    except SettingsError as exc:
        raise _user_error(exc, None) from None
    if scans:
        return await _scan(args, device, scans, out)
    every = args.every if args.every is not None else device.poll_s
    try:
        await device.connect()
    except DeviceError as exc:
        await device.close()
        raise _user_error(exc, device) from None
    print(f"probe: {device.description}", file=sys.stderr)
    taken = failed = 0
    absurd: str | None = None
    try:
        while args.count <= 0 or taken + failed < args.count:
            if taken + failed:
                await device.clock.sleep(every)
            try:
                reading = await device.read()
            except (NoAnswer, BadReply, LinkLost) as exc:
                failed += 1
                print(f"probe: {exc}", file=sys.stderr)
                continue
            except DeviceError as exc:
                raise _user_error(exc, device) from None
            taken += 1
            absurd = absurd or _absurd(reading)
            print(reading_json(reading) if args.json else reading_line(reading, units),
                  file=out, flush=True)
    finally:
        await device.close()
    if not taken:
        raise UserError(f"no reading from {device.description} in {failed} tries")
    if absurd:
        raise UserError(
            f"the device answers but the values look wrong: {absurd}\n"
            "  try: check the map's scale or decimals (raw 8523 with one decimal place is "
            "852.3), signed, word_order, and units (C or F) against the controller's manual")
    return 0


async def _scan(args: argparse.Namespace, device: Device, scans: list[Any], out: Any) -> int:
    from tuikiln.commands.probe_scan import ScanResult, report_json, report_lines, scan_pass
    from tuikiln.drivers.modbus import ModbusDevice

    if not isinstance(device, ModbusDevice):
        raise UserError(f"--scan reads Modbus registers; the kiln file's device is "
                        f"{device.description}")
    every = args.every if args.every is not None else device.poll_s
    try:
        await device.open_link()
    except DeviceError as exc:
        await device.close()
        raise _user_error(exc, device) from None
    print(f"probe: scanning {device.description}, {args.count} passes {every:g} s apart "
          "(reads only)", file=sys.stderr)
    results = [ScanResult(r) for r in scans]
    try:
        for number in range(args.count):
            if number:
                await device.clock.sleep(every)
            for result in results:
                try:
                    await scan_pass(device, result)
                except LinkLost as exc:
                    raise _user_error(exc, device) from None
    finally:
        await device.close()
    for result in results:
        if args.json:
            print(report_json(result), file=out)
        else:
            print("\n".join(report_lines(result)), file=out)
    if not any(result.answered() for result in results):
        raise UserError(f"no address in the scanned ranges answered ({device.description})\n"
                        "  try: another function code (many controllers keep readings in "
                        "input registers, fc 4), or check the port settings with a plain "
                        "`tuikiln probe`")
    return 0


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_probe(args, sys.stdout))
    except KeyboardInterrupt:
        return 130
