"""`tuikiln temper TEMP TIME [--to TEMP2]`: the Hollomon-Jaffe tempering parameter of a hold.

With --to, also the time at TEMP2 that gives the same parameter (the same hardness, to the
extent the parameter holds for the steel).
"""

from __future__ import annotations

import argparse
import json
import math
import re

from tuikiln.analysis.temper import DEFAULT_C, equivalent_hours, parameter
from tuikiln.errors import UserError
from tuikiln.units import UNITS, c_to_f, format_duration, parse_duration, parse_temperature, symbol

# Iron-carbon diagram: the eutectoid (A1) line is at 727 °C in plain carbon steel (textbook
# value); alloying moves it. Above it the steel starts to turn back into austenite.
_LOWER_CRITICAL_C = 727.0
_NEAR_CRITICAL_C = 700.0
_UNIT_SUFFIX = re.compile(r"([CcFf])\s*$")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("temperature", metavar="TEMP", help='tempering temperature: "400F", "205C"')
    parser.add_argument("time", metavar="TIME", help='time at temperature: "2h", "90m", "1h30m"')
    parser.add_argument(
        "--to", metavar="TEMP2", help="also show the time at TEMP2 that gives the same parameter"
    )
    parser.add_argument(
        "--c",
        type=float,
        default=DEFAULT_C,
        metavar="C",
        help=f"the constant C, which depends on the steel (default {DEFAULT_C:g})",
    )
    parser.add_argument(
        "--units",
        choices=UNITS,
        type=str.upper,
        help="unit of temperatures written without one (C or F)",
    )
    parser.add_argument("--json", dest="json_output", action="store_true", help="print JSON")


def _temperature(text: str, units: str | None, what: str) -> tuple[float, str]:
    """(°C, the unit to show it in) for a temperature the user wrote."""
    try:
        celsius = parse_temperature(text, units)
    except ValueError as exc:
        hint = "" if units else " (or add --units C or --units F)"
        raise UserError(f"{what}: {exc}{hint}") from None
    suffix = _UNIT_SUFFIX.search(text)
    shown = suffix.group(1).upper() if suffix else str(units)
    return celsius, shown


def _both(celsius: float, units: str) -> str:
    """'600 °F (315.6 °C)', or '205 °C' when the user wrote °C."""
    if units == "C":
        return f"{celsius:g} °C"
    return f"{c_to_f(celsius):.4g} {symbol('F')} ({celsius:.1f} °C)"


def _hours(hours: float) -> str:
    figure = f"{hours:.3g} h"
    if hours < 1.0 / 3600.0:
        return figure + " (under a second: too far apart for the parameter to mean much)"
    if hours < 1.0:
        return figure + f" ({hours * 60.0:.3g} min)"
    if hours > 100_000.0:
        return figure + " (far longer than any practical temper)"
    if hours < 1000.0 and abs(hours - round(hours)) > 1e-9:
        return figure + f" ({format_duration(hours * 3600.0)})"
    return figure


def run(args: argparse.Namespace) -> int:
    temp_c, shown = _temperature(args.temperature, args.units, "TEMP")
    try:
        seconds = parse_duration(args.time)
    except ValueError as exc:
        raise UserError(f"TIME: {exc}") from None
    if seconds <= 0:
        raise UserError(f'TIME: "{args.time}" is no time at all: give the time at temperature')
    c = float(args.c)
    if not math.isfinite(c) or c <= 0:
        raise UserError(f"--c {args.c:g}: C must be a number above zero (about 10 to 20)")
    hours = seconds / 3600.0
    try:
        p = parameter(temp_c, hours, c)
    except ValueError as exc:
        raise UserError(f"TEMP: {exc}") from None

    to_c: float | None = None
    to_shown = shown
    same_hours: float | None = None
    if args.to is not None:
        to_c, to_shown = _temperature(args.to, args.units, "--to")
        try:
            same_hours = equivalent_hours(p, to_c, c)
        except ValueError as exc:
            raise UserError(f"--to: {exc}") from None
        if not math.isfinite(same_hours):
            raise UserError(
                f"--to: at {_both(to_c, to_shown)} the same parameter would take "
                "longer than any tempering ever could"
            )

    if args.json_output:
        print(
            json.dumps(
                {
                    "parameter": p,
                    "equivalent_hours": same_hours,
                    "c": c,
                    "temperature_c": temp_c,
                    "hours": hours,
                    "to_temperature_c": to_c,
                },
                indent=2,
            )
        )
        return 0

    print(
        f"Hollomon-Jaffe tempering parameter P = T (C + log10 t), T in kelvin, t in hours, "
        f"C = {c:g}"
    )
    print(f"  {_hours(hours)} at {_both(temp_c, shown)}: P = {p:,.0f}")
    if to_c is not None and same_hours is not None:
        print(f"  the same P at {_both(to_c, to_shown)}: {_hours(same_hours)}")
    print(
        f"C depends on the steel ({DEFAULT_C:g} is the usual default): compare parameters "
        "only with the same C, and read the hardness from the steel's own tempering chart."
    )
    for celsius, units in ((temp_c, shown), (to_c, to_shown)):
        if celsius is not None and celsius >= _NEAR_CRITICAL_C:
            print(
                f"Note: {_both(celsius, units)} is near or above the lower critical "
                f"temperature (about {_LOWER_CRITICAL_C:g} °C in plain carbon steel); the "
                "parameter only describes tempering below it."
            )
    return 0
