"""MQTT payloads for dashboards (tuikiln/alerts/payloads.py, discovery.py): ISO 8601 times
beside the epoch seconds, state texts of at most 255 characters with the whole text on the
attributes topic, and the discovery origin block; end to end through a real mosquitto, read
back by `mosquitto_sub`."""

from __future__ import annotations

import asyncio
import json
import shutil
import subprocess
from datetime import datetime
from typing import TYPE_CHECKING, Any

import pytest

from tests.test_alerts_mqtt import BASE, KILN, Watcher, settings_for
from tuikiln import __version__
from tuikiln import events as ev
from tuikiln.alerts import discovery
from tuikiln.alerts.mqtt import MqttPublisher
from tuikiln.alerts.payloads import (
    STATE_TEXT_MAX,
    iso_utc,
    state_and_attributes,
    with_iso_times,
)
from tuikiln.events import Event

if TYPE_CHECKING:
    from tests.mqtt_broker import Broker

MOSQUITTO_SUB = shutil.which("mosquitto_sub")
DATE = shutil.which("date")


def test_iso_times_agree_with_gnu_date_and_parse_back() -> None:
    # Reference: GNU coreutils `date -u -d @EPOCH`, a program outside the project.
    if DATE is None:
        pytest.skip("no date program")
    for epoch in (0, 1_700_000_000, 1_764_748_800):
        theirs = subprocess.run([DATE, "-u", "-d", f"@{epoch}", "+%Y-%m-%dT%H:%M:%S+00:00"],
                                capture_output=True, text=True, check=True).stdout.strip()
        ours = iso_utc(epoch)
        assert ours == theirs.replace("+00:00", ".000+00:00")
        # ISO 8601 extended format as Python's datetime reads it back, to the same instant.
        assert datetime.fromisoformat(ours).timestamp() == epoch
    assert iso_utc(1.25).endswith(":01.250+00:00")


def test_every_epoch_key_gets_a_twin_and_the_number_stays() -> None:
    record = with_iso_times({"time": 1_700_000_000.5, "started": None, "chamber_c": 20.0})
    assert record["time"] == 1_700_000_000.5  # programs read the number: unchanged
    assert record["time_iso"] == "2023-11-14T22:13:20.500+00:00"
    assert "started_iso" not in record  # an unknown time gets no made-up text
    assert with_iso_times({"time": float("nan")})["time_iso"] is None


def test_long_texts_are_cut_in_the_state_and_whole_in_the_attributes() -> None:
    words = "holding at 1010 °C; " * 40  # 800 characters
    state, attributes = state_and_attributes({
        "step_words": words, "profile": "A2", "chamber_c": 1010.0, "time": 5.0,
        "alarms": [{"kind": "over-target", "message": "x" * 400}],
        "equalization": {"words": "the load is within 3 °C of the air"},
    })
    assert len(state["step_words"]) == STATE_TEXT_MAX and state["step_words"].endswith("…")
    assert state["profile"] == "A2" and state["chamber_c"] == 1010.0
    assert all(len(v) <= STATE_TEXT_MAX for v in state.values() if isinstance(v, str))
    assert attributes["step_words"] == words
    assert attributes["alarms"][0]["message"] == "x" * 400
    assert attributes["equalization_words"] == "the load is within 3 °C of the air"
    assert attributes["time_iso"] == state["time_iso"]


def test_the_origin_names_this_program_and_its_version() -> None:
    block = discovery.origin()
    assert block["name"] == "tuikiln" and block["sw_version"] == __version__
    # A support link only where the package names a web page (dashboards check the form).
    assert block.get("support_url", "https://").startswith(("https://", "http://"))


async def _retained_by_mosquitto_sub(broker: Broker, topic: str, count: int) -> list[str]:
    """What an independent client gets at once on subscribing: the retained messages."""
    sub = await asyncio.create_subprocess_exec(
        MOSQUITTO_SUB or "mosquitto_sub", "-h", broker.host, "-p", str(broker.port),
        "-u", "watcher", "-P", broker.users["watcher"], "-t", topic, "-v", "-C", str(count),
        "-W", "10", stdout=asyncio.subprocess.PIPE)
    out, _ = await sub.communicate()
    assert sub.returncode == 0, out
    return out.decode().splitlines()


async def test_state_attributes_and_iso_times_through_mosquitto(
    mosquitto: Broker, tmp_path: Any
) -> None:
    if not MOSQUITTO_SUB:
        pytest.skip("mosquitto_sub is not installed (Debian package mosquitto-clients)")
    words = "soaking: the load is a 40 mm block wrapped in foil, " * 10  # 520 characters
    publisher = MqttPublisher(settings_for(mosquitto, tmp_path, discovery=True))
    await publisher.start()
    try:
        assert await publisher.wait_connected(5)
        async with Watcher(mosquitto, topics=(f"{BASE}/#", "homeassistant/#")) as watcher:
            publisher.state({"step_words": words, "profile": "Block", "chamber_c": 1010.0,
                             "time": 1_700_000_000.0, "started": 1_699_990_000.0,
                             "alarms": []})
            publisher.event(Event(time=1_700_000_001.0, kind=ev.NOTE, message="a note",
                                  severity="info", detail={}, run_id=4))
            await watcher.wait_for(lambda: watcher.on(f"{BASE}/state")
                                   and watcher.on(f"{BASE}/event"))
        lines = await _retained_by_mosquitto_sub(mosquitto, f"{BASE}/#", 3)
    finally:
        await publisher.stop()
    seen = dict(line.split(" ", 1) for line in lines)
    state = json.loads(seen[f"{BASE}/state"])
    assert len(state["step_words"]) <= STATE_TEXT_MAX
    assert state["time_iso"] == "2023-11-14T22:13:20.000+00:00"
    assert state["started_iso"] == "2023-11-14T19:26:40.000+00:00"  # 10,000 s earlier
    assert json.loads(seen[f"{BASE}/attributes"])["step_words"] == words
    event = json.loads(watcher.on(f"{BASE}/event")[0])
    assert event["time"] == 1_700_000_001.0 and event["time_iso"].startswith("2023-11-14T22:13:21")
    configs = {t: json.loads(p) for t, p, retain in watcher.messages
               if retain and t.startswith("homeassistant/")}
    step = configs["homeassistant/sensor/bench-oven/step/config"]
    # Discovery fields of the open MQTT discovery convention (home-assistant.io/integrations/
    # mqtt: "origin", json_attributes_topic), from memory of its documentation.
    assert step["json_attributes_topic"] == f"{BASE}/attributes"
    assert step["origin"]["name"] == "tuikiln" and step["origin"]["sw_version"] == __version__
    assert step["device"]["name"] == KILN
