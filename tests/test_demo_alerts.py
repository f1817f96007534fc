"""The demo's in-process engine sends a kiln file's alerts: a hook runs at the run's end."""

from __future__ import annotations

from pathlib import Path

from tests.waiting import wait_until
from tuikiln.kiln import parse_kiln
from tuikiln.profile import parse_profile
from tuikiln.ui.inprocess import build_engine, run_engine

PROFILE = 'units = "C"\n[[step]]\nramp = "max"\nto = 120\n[[step]]\nhold = "2m"\n'


async def test_a_hook_runs_at_the_end_of_an_in_process_run(tmp_path: Path) -> None:
    marker = tmp_path / "ended"
    kiln = parse_kiln(
        f'name = "Bench oven"\n[[hook]]\non = ["end"]\n'
        f'run = ["/usr/bin/touch", "{marker}-{{event}}"]\ntimeout = "5s"\n',
        str(tmp_path / "kiln.toml"))
    engine = build_engine(kiln, parse_profile(PROFILE), tmp_path / "data", 0.0, alerts=True)
    assert engine.sinks, "a kiln file with hooks gives the engine an alert fan-out"
    for sink in engine.sinks:
        await sink.start()
    try:
        assert await run_engine(engine) == "completed"
    finally:
        for sink in engine.sinks:
            await sink.stop()
    wait_until(Path(f"{marker}-run-end").exists, 5, "the run-end hook to leave its mark")


def test_no_alerts_without_a_kiln_file(tmp_path: Path) -> None:
    from tuikiln.kiln import Kiln

    engine = build_engine(Kiln(), parse_profile(PROFILE), tmp_path / "data", 0.0, alerts=True)
    assert engine.sinks == []
