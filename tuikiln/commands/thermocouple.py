"""`tuikiln thermocouple TYPE VALUE`: millivolts to temperature and back (NIST ITS-90).

    tuikiln thermocouple K 41.276mV             -> °C, cold junction 0 °C
    tuikiln thermocouple K "1.2 mV" --cold 77F  -> °C, compensating a 25 °C cold junction
    tuikiln thermocouple K 1000C --cold 25      -> the mV a meter reads with that cold junction
"""

from __future__ import annotations

import argparse
import json
import re
from typing import Any

from tuikiln.drivers import its90
from tuikiln.errors import UserError
from tuikiln.units import c_to_f, parse_temperature

_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)"
_MILLIVOLTS_RE = re.compile(rf"^\s*({_NUMBER})\s*mv\s*$", re.IGNORECASE)
_BARE_NUMBER_RE = re.compile(rf"^\s*{_NUMBER}\s*$")
# argparse takes "-100C" or "-3.5mV" for an unknown option; let values with a unit through.
_NEGATIVE_VALUE_RE = re.compile(r"^-(?:\d+(?:\.\d*)?|\.\d+)\s*(?:mv|°?[cf])?$", re.IGNORECASE)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "tc_type", metavar="TYPE", help=f"thermocouple type: {', '.join(its90.TYPES)}"
    )
    parser.add_argument(
        "value",
        metavar="VALUE",
        help='a reading such as "41.276mV" (gives °C) or a temperature "1000C", "1832F" (gives mV)',
    )
    parser.add_argument(
        "--cold",
        metavar="T",
        default="0",
        help='cold-junction temperature: "25", "25C" or "77F" (default 0 °C)',
    )
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    # argparse has no public hook for this; without it "-100C" reads as an unknown option.
    parser._negative_number_matcher = _NEGATIVE_VALUE_RE


def _parse_millivolts(text: str) -> float | None:
    match = _MILLIVOLTS_RE.match(text)
    return float(match.group(1)) if match else None


def _parse_value(text: str) -> tuple[str, float]:
    """('mv', millivolts) or ('c', °C) from VALUE, or a UserError in plain words."""
    millivolts = _parse_millivolts(text)
    if millivolts is not None:
        return "mv", millivolts
    if _BARE_NUMBER_RE.match(text):
        number = text.strip()
        raise UserError(
            f'"{text}" needs a unit: write "{number}mV" for a reading, '
            f'or "{number}C" / "{number}F" for a temperature'
        )
    try:
        return "c", parse_temperature(text)
    except ValueError:
        raise UserError(
            f'"{text}" is neither a reading such as "41.276mV" nor a temperature '
            'such as "1000C" or "1832F"'
        ) from None


def _parse_cold(text: str) -> float:
    try:
        return parse_temperature(text, default_units="C")
    except ValueError:
        raise UserError(
            f'--cold "{text}" is not a temperature such as "25", "25C" or "77F"'
        ) from None


def convert(tc_type: str, value: str, cold: str = "0") -> dict[str, Any]:
    """The conversion the command prints, as a plain dict (also the --json object)."""
    kind, number = _parse_value(value)
    cold_c = _parse_cold(cold)
    try:
        letter = its90.normal_type(tc_type)
        if kind == "mv":
            emf = number
            temperature = its90.temperature_c(letter, emf, cold_junction_c=cold_c)
        else:
            temperature = number
            emf = its90.emf_mv(letter, temperature, cold_junction_c=cold_c)
    except ValueError as exc:  # its90.OutOfRange and its90.UnknownType
        raise UserError(str(exc)) from None
    return {
        "type": letter,
        "direction": "mv_to_temperature" if kind == "mv" else "temperature_to_mv",
        "emf_mv": round(emf, 6),
        "temperature_c": round(temperature, 4),
        "temperature_f": round(c_to_f(temperature), 4),
        "cold_junction_c": round(cold_c, 4),
        "cold_junction_f": round(c_to_f(cold_c), 4),
    }


def _plain(result: dict[str, Any]) -> str:
    emf = f"{result['emf_mv']:.3f} mV"
    temperature = f"{result['temperature_c']:.1f} °C ({result['temperature_f']:.1f} °F)"
    pair = (
        f"{emf} -> {temperature}"
        if result["direction"] == "mv_to_temperature"
        else f"{temperature} -> {emf}"
    )
    return f"type {result['type']}: {pair}, cold junction {result['cold_junction_c']:.1f} °C"


def run(args: argparse.Namespace) -> int:
    result = convert(args.tc_type, args.value, args.cold)
    print(json.dumps(result, ensure_ascii=False) if args.json else _plain(result))
    return 0
