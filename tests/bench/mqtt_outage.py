"""Benchmark: what one alert costs the engine while the MQTT broker is away.

A real mosquitto (tests/mqtt_broker.py) is started, the publisher connects, the broker is
stopped, and the engine's three calls (event(), reading(), state()) are timed while the
publisher keeps trying to reconnect. Target: the slowest round under 10 ms (the engine ticks
once a second; an alert must never hold it up). The test suite checks only the behaviour
(every call queues at once, nothing lost, all delivered in order);
tests/test_alerts_mqtt.py::test_broker_outage_queues_events_in_order_and_republishes_state.

Run: .venv/bin/python tests/bench/mqtt_outage.py [--quick]
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
TARGET_S = 0.01


async def _measure(rounds: int) -> list[float]:
    from tests.mqtt_broker import Broker, free_port
    from tuikiln import events as ev
    from tuikiln.alerts.mqtt import MqttPublisher
    from tuikiln.alerts.settings import check_mqtt_settings
    from tuikiln.events import Event

    folder = tempfile.mkdtemp(prefix="tuikiln-mosquitto-")
    os.chmod(folder, 0o755)
    broker = Broker(folder=folder, port=free_port())
    broker.write_config()
    broker.start()
    publisher = None
    try:
        secret = Path(folder) / "mqtt.pass"
        secret.write_text(broker.users["kiln"] + "\n")
        secret.chmod(0o600)
        settings, problems = check_mqtt_settings(broker.mqtt_table(str(secret)), "Bench Oven",
                                                 folder)
        assert settings is not None and not problems, problems
        publisher = MqttPublisher(settings, emit=lambda _e: None, retry_min=0.25,
                                  retry_max=0.5)
        await publisher.start()
        assert await publisher.wait_connected(10), "the publisher never connected"
        broker.stop()
        while publisher.connected:
            await asyncio.sleep(0.02)
        took = []
        for n in range(rounds):
            event = Event(time=1_700_000_000.0 + n, kind=ev.NOTE, message=f"event {n}",
                          severity="info", detail={"n": n}, run_id=7)
            started = time.perf_counter()
            publisher.event(event)
            publisher.reading({"n": n})
            publisher.state({"phase": "during", "n": n})
            took.append(time.perf_counter() - started)
            await asyncio.sleep(0.005)  # let the reconnect attempts run between rounds
        return took
    finally:
        if publisher is not None:
            await publisher.stop(timeout=1.0)
        broker.stop()
        shutil.rmtree(folder, ignore_errors=True)


def run(quick: bool = False) -> dict[str, dict]:
    if sys.path[0] != str(ROOT):
        sys.path.insert(0, str(ROOT))
    from tests.mqtt_broker import MOSQUITTO, MOSQUITTO_PASSWD

    if not MOSQUITTO or not MOSQUITTO_PASSWD:
        raise RuntimeError("mosquitto is not installed")
    took = asyncio.run(_measure(200 if quick else 1000))
    worst = max(took)
    return {
        "mqtt_outage_round_worst": {
            "value": round(worst * 1e6), "unit": "µs", "target": f"< {TARGET_S * 1e6:.0f} µs",
            "ok": worst < TARGET_S,
            "note": f"event()+reading()+state() with the broker down, {len(took)} rounds",
        },
        "mqtt_outage_round_median": {
            "value": round(statistics.median(took) * 1e6), "unit": "µs", "target": "report",
            "ok": None,
        },
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    figures = run(quick=args.quick)
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        for name, values in figures.items():
            print(f"{name}: {values['value']} {values['unit']} (target {values['target']})")
    return 0 if all(v["ok"] is not False for v in figures.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
