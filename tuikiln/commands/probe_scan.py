"""`tuikiln probe --scan`: read ranges of registers or coils several times and show which
change, to help a person write a map for a controller whose manual is vague.

Only reads, like the rest of probe. A range that the controller refuses as a whole (Modbus
exception "illegal data address") is halved until the addresses it does hold are found.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from typing import Any

from tuikiln.drivers.errors import BadReply, NoAnswer
from tuikiln.errors import UserError

KIND_NAMES = {1: "coils", 2: "discrete inputs", 3: "holding registers", 4: "input registers"}
# Modbus Application Protocol Specification V1.1b3, 6.1-6.4: at most 2000 bits or 125
# registers in one read request.
PER_REQUEST = {1: 2000, 2: 2000, 3: 125, 4: 125}
MAX_SPAN = 2000  # addresses in one --scan range: enough for a map, short enough to finish

_SPEC = re.compile(r"^\s*(\d+)\s*:\s*(\d+)\s*(?:-\s*(\d+))?\s*$")


@dataclass(frozen=True)
class ScanRange:
    fc: int
    first: int
    last: int


@dataclass
class ScanResult:
    range: ScanRange
    passes: list[dict[int, int]] = field(default_factory=list)
    refused: set[int] = field(default_factory=set)
    silent: set[int] = field(default_factory=set)

    def answered(self) -> list[int]:
        seen: set[int] = set()
        for values in self.passes:
            seen.update(values)
        return sorted(seen)

    def values_of(self, address: int) -> list[int]:
        return [p[address] for p in self.passes if address in p]


def parse_scan(text: str) -> ScanRange:
    """'3:0-63' (function code : first - last address), or '1:0' for one address."""
    match = _SPEC.match(text)
    if not match:
        raise UserError(f'--scan "{text}": give FC:FIRST-LAST, e.g. --scan 3:0-63 (holding '
                        "registers 0 to 63); FC is 1 coils, 2 discrete inputs, 3 holding "
                        "or 4 input registers")
    fc, first = int(match.group(1)), int(match.group(2))
    last = int(match.group(3)) if match.group(3) is not None else first
    if fc not in KIND_NAMES:
        raise UserError(f'--scan "{text}": function code {fc} does not read; use 1, 2, 3 or 4')
    if not 0 <= first <= last <= 0xFFFF:
        raise UserError(f'--scan "{text}": addresses run 0-65535 and FIRST must not be after '
                        "LAST")
    if last - first + 1 > MAX_SPAN:
        raise UserError(f'--scan "{text}": at most {MAX_SPAN} addresses per range; '
                        "give several --scan options")
    return ScanRange(fc, first, last)


async def _read(device: Any, fc: int, first: int, count: int, result: ScanResult,
                out: dict[int, int]) -> None:
    """Read `count` from `first` into `out`, halving ranges the controller refuses."""
    try:
        words = await device.read_words(fc, first, count)
    except BadReply:
        if count == 1:
            result.refused.add(first)
            return
        half = count // 2
        await _read(device, fc, first, half, result, out)
        await _read(device, fc, first + half, count - half, result, out)
        return
    except NoAnswer:
        # Some controllers stay silent rather than refuse: do not halve (each try would
        # cost a whole timeout), just say so.
        result.silent.update(range(first, first + count))
        return
    for offset, value in enumerate(words):
        out[first + offset] = value


async def scan_pass(device: Any, result: ScanResult) -> None:
    """One read of the whole range; addresses refused in an earlier pass are left out."""
    r = result.range
    values: dict[int, int] = {}
    wanted = [a for a in range(r.first, r.last + 1) if a not in result.refused]
    for start, count in _runs(wanted, PER_REQUEST[r.fc]):
        await _read(device, r.fc, start, count, result, values)
    result.passes.append(values)


def _runs(addresses: list[int], limit: int) -> list[tuple[int, int]]:
    """Contiguous runs of addresses, each at most `limit` long."""
    runs: list[tuple[int, int]] = []
    for address in addresses:
        if runs and runs[-1][0] + runs[-1][1] == address and runs[-1][1] < limit:
            runs[-1] = (runs[-1][0], runs[-1][1] + 1)
        else:
            runs.append((address, 1))
    return runs


def _spans(addresses: set[int]) -> str:
    parts = []
    for start, count in _runs(sorted(addresses), 1 << 30):
        parts.append(str(start) if count == 1 else f"{start}-{start + count - 1}")
    return ", ".join(parts)


def _signed(word: int) -> int:
    return word - 0x10000 if word >= 0x8000 else word


def report_lines(result: ScanResult) -> list[str]:
    r = result.range
    bits = r.fc in (1, 2)
    lines = [f"{KIND_NAMES[r.fc]} (fc {r.fc}) {r.first}-{r.last}, {len(result.passes)} "
             "passes:"]
    answered = result.answered()
    if answered:
        lines.append("  address   first    last     min     max" + ("" if bits else
                     "  signed (last)"))
    for address in answered:
        values = result.values_of(address)
        changes = len(set(values)) > 1
        row = (f"  {address:7d} {values[0]:7d} {values[-1]:7d} {min(values):7d} "
               f"{max(values):7d}")
        if not bits:
            row += f"  {_signed(values[-1]):13d}"
        lines.append(row + ("  CHANGES" if changes else ""))
    changing = [a for a in answered if len(set(result.values_of(a))) > 1]
    lines.append(f"  changed: {_spans(set(changing)) or 'none'}")
    if result.refused:
        lines.append(f"  refused by the controller (no such address): {_spans(result.refused)}")
    if result.silent:
        lines.append(f"  no answer: {_spans(result.silent)}")
    return lines


def report_json(result: ScanResult) -> str:
    r = result.range
    return json.dumps({
        "fc": r.fc, "first": r.first, "last": r.last, "passes": len(result.passes),
        "values": {str(a): result.values_of(a) for a in result.answered()},
        "changed": [a for a in result.answered() if len(set(result.values_of(a))) > 1],
        "refused": sorted(result.refused), "silent": sorted(result.silent),
    })
