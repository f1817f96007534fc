"""Benchmark: hostile inputs tried per parser and how many ended in a traceback.

    .venv/bin/python tests/bench/fuzz_hostile.py [--quick]

The strategies are the suite's own (tests/test_hostile_files.py, test_hostile_wire.py,
test_hostile_round2.py), run many more times here. A traceback is any exception other than
the parser's own way of saying no (FileProblems, MapError, a Refusal). Target: 0.
"""

from __future__ import annotations

import asyncio
import json
import sys
import tempfile
import time
import traceback
from collections.abc import Callable
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

ROOT = Path(__file__).resolve().parent.parent.parent
sys.path.insert(0, str(ROOT))

from tests.test_hostile_files import (  # noqa: E402
    GOOD_KILNS,
    GOOD_MAPS,
    GOOD_PROFILES,
    _layouts,
    csv_logs,
    random_or_mutated,
)
from tests.test_hostile_wire import control_lines, payloads  # noqa: E402
from tuikiln.alerts.remote import parse_command  # noqa: E402
from tuikiln.analysis.csvlog import parse_csv_log  # noqa: E402
from tuikiln.drivers.maps import MapError, parse_map  # noqa: E402
from tuikiln.errors import FileProblems  # noqa: E402
from tuikiln.kiln import parse_kiln  # noqa: E402
from tuikiln.plan import plan_profile  # noqa: E402
from tuikiln.profile import parse_profile  # noqa: E402


def _tally(name: str, strategy: st.SearchStrategy, check: Callable, n: int,
           results: dict[str, list[int]], first: dict[str, str]) -> None:
    counts = results.setdefault(name, [0, 0])

    @settings(max_examples=n, deadline=None, database=None,
              suppress_health_check=list(HealthCheck))
    @given(value=strategy)
    def one(value) -> None:
        counts[0] += 1
        try:
            check(value)
        except Exception:
            counts[1] += 1
            first.setdefault(name, traceback.format_exc(limit=3))

    one()


def _profile(text: str) -> None:
    try:
        plan_profile(parse_profile(text, "f.toml", max_c=1200.0))
    except FileProblems:
        pass


def _kiln(text: str) -> None:
    try:
        parse_kiln(text, "k.toml")
    except FileProblems:
        pass


def _map(text: str) -> None:
    try:
        parse_map(text, "m.toml")
    except MapError:
        pass


def _csv(pair) -> None:
    data, layout = pair
    try:
        parse_csv_log(data, "o.csv", layout)
    except FileProblems:
        pass


class _Engine:
    listeners: list = []

    def status(self) -> dict:
        return {"state": "running"}

    def command(self, name, arg=None, source="command") -> dict:
        from tuikiln.plaintext import plain

        plain(arg or "").encode("utf-8")
        return {"ok": True, "message": "done"}


def _socket(lines: list[bytes], results: dict[str, list[int]], first: dict[str, str]) -> None:
    from tuikiln import control

    counts = results.setdefault("control socket", [0, 0])

    async def main() -> None:
        with tempfile.TemporaryDirectory() as folder:
            server = control.ControlServer(_Engine(), Path(folder) / "c" / "k.sock")
            await server.start()
            try:
                for line in lines:
                    counts[0] += 1
                    try:
                        reader, writer = await asyncio.open_unix_connection(str(server.path),
                                                                            limit=1 << 20)
                        writer.write(line.rstrip(b"\n").replace(b"\n", b" ") + b"\n")
                        await writer.drain()
                        answer = json.loads(await asyncio.wait_for(reader.readline(), 10))
                        assert isinstance(answer, dict)
                        writer.close()
                    except Exception:
                        counts[1] += 1
                        first.setdefault("control socket", traceback.format_exc(limit=3))
            finally:
                await server.close()

    asyncio.run(main())


def run(quick: bool = False) -> dict[str, dict]:
    n = 300 if quick else 3000
    results: dict[str, list[int]] = {}
    first: dict[str, str] = {}
    start = time.perf_counter()
    _tally("profile + plan", random_or_mutated(GOOD_PROFILES), _profile, n, results, first)
    _tally("kiln", random_or_mutated(GOOD_KILNS), _kiln, n, results, first)
    _tally("modbus map", random_or_mutated(GOOD_MAPS), _map, n, results, first)
    _tally("csv import", st.tuples(csv_logs(), _layouts), _csv, n, results, first)
    _tally("mqtt command", payloads(), parse_command, n, results, first)
    lines: list[bytes] = []
    _tally("(socket lines drawn)", control_lines(), lines.append, n // 3, {}, {})
    _socket(lines, results, first)
    seconds = time.perf_counter() - start
    tried = sum(c[0] for c in results.values())
    tracebacks = sum(c[1] for c in results.values())
    out: dict[str, dict] = {
        "hostile inputs tried": {"value": float(tried), "unit": "inputs", "target": "-",
                                 "ok": None, "note": f"{seconds:.0f} s"},
        "tracebacks": {"value": float(tracebacks), "unit": "", "target": "= 0",
                       "ok": tracebacks == 0},
    }
    for name, (count, bad) in results.items():
        out[f"  {name}"] = {"value": float(bad), "unit": f"tracebacks of {count}",
                            "target": "= 0", "ok": bad == 0}
    for name, text in first.items():
        print(f"first traceback in {name}:\n{text}", file=sys.stderr)
    return out


if __name__ == "__main__":
    quick = "--quick" in sys.argv
    for figure, row in run(quick).items():
        print(f"{figure:<24} {row['value']:>10.0f} {row['unit']:<22} target {row['target']}"
              f"  {'ok' if row['ok'] else ('-' if row['ok'] is None else 'MISSED')}")
