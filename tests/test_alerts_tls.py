"""MQTT over TLS against a real mosquitto whose listener speaks TLS only, with a CA and a
server certificate made here by openssl (no certificate is shipped)."""

from __future__ import annotations

import asyncio
import shutil
import subprocess
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import aiomqtt
import pytest

from tuikiln import events as ev
from tuikiln.alerts.mqtt import MqttPublisher
from tuikiln.alerts.settings import check_mqtt_settings
from tuikiln.events import Event

if TYPE_CHECKING:
    from tests.mqtt_broker import Broker

OPENSSL = shutil.which("openssl")


def make_ca_and_server(folder: str, name: str = "test-ca") -> tuple[str, str, str]:
    """A throw-away CA and a server certificate for 127.0.0.1, signed by it."""
    def openssl(*args: str) -> None:
        subprocess.run([OPENSSL or "openssl", *args], check=True, capture_output=True,
                       cwd=folder)

    openssl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2", "-subj",
            f"/CN={name}", "-keyout", f"{name}.key", "-out", f"{name}.crt")
    openssl("req", "-newkey", "rsa:2048", "-nodes", "-subj", "/CN=127.0.0.1",
            "-keyout", "server.key", "-out", "server.csr")
    Path(folder, "san.ext").write_text("subjectAltName = IP:127.0.0.1\n")
    openssl("x509", "-req", "-in", "server.csr", "-CA", f"{name}.crt", "-CAkey", f"{name}.key",
            "-CAcreateserial", "-days", "2", "-extfile", "san.ext", "-out", "server.crt")
    return (str(Path(folder, f"{name}.crt")), str(Path(folder, "server.crt")),
            str(Path(folder, "server.key")))


@pytest.fixture
def tls_broker(mosquitto_factory: Callable[..., Broker]) -> Broker:
    if not OPENSSL:
        pytest.skip("openssl is not installed")
    return mosquitto_factory(tls=make_ca_and_server)


def publisher(broker: Broker, tmp_path: Path, ca: str | None, emit: Any = None
              ) -> MqttPublisher:
    (tmp_path / "mqtt.pass").write_text(broker.users["kiln"] + "\n")
    (tmp_path / "mqtt.pass").chmod(0o600)
    table = broker.mqtt_table("mqtt.pass", tls=ca if ca else True)
    settings, problems = check_mqtt_settings(table, "Bench oven", str(tmp_path))
    assert problems == [] and settings is not None
    return MqttPublisher(settings, emit=emit)


async def test_events_arrive_over_tls_with_the_ca_file(tls_broker: Broker, tmp_path: Path
                                                       ) -> None:
    ca = tls_broker.tls[0] if tls_broker.tls else ""
    async with aiomqtt.Client(tls_broker.host, tls_broker.port, username="watcher",
                              password=tls_broker.users["watcher"],
                              tls_params=aiomqtt.TLSParameters(ca_certs=ca)) as watcher:
        await watcher.subscribe("tuikiln/bench-oven/event", qos=1)
        pub = publisher(tls_broker, tmp_path, ca)
        await pub.start()
        try:
            assert await pub.wait_connected(10)
            pub.event(Event(time=1.0, kind=ev.NOTE, message="over TLS", detail={"text": "x"}))
            async with asyncio.timeout(10):
                async for message in watcher.messages:
                    assert b"over TLS" in bytes(message.payload)
                    break
        finally:
            await pub.stop()


async def test_a_broker_with_an_unknown_certificate_is_refused_and_reported(
    tls_broker: Broker, tmp_path: Path
) -> None:
    other = tmp_path / "other"
    other.mkdir()
    wrong_ca = make_ca_and_server(str(other), "other-ca")[0]
    failures: list[Event] = []
    pub = publisher(tls_broker, tmp_path, wrong_ca, emit=failures.append)
    await pub.start()
    try:
        assert not await pub.wait_connected(3)  # never connects to a server it cannot trust
        pub.event(Event(time=1.0, kind=ev.NOTE, message="kept", detail={}))  # never raises
    finally:
        await pub.stop()
    assert any(e.kind == ev.ALERT_FAILED for e in failures)
