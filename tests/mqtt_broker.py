"""A real mosquitto broker for tests, on a free loopback port, with logins required.

Use it from a test module with `from tests.mqtt_broker import mosquitto, mosquitto_factory  # noqa`.
The broker runs Debian's /usr/sbin/mosquitto with a generated config (`allow_anonymous false`,
a password file made by `mosquitto_passwd`). Started as root, mosquitto drops to the user
"mosquitto", so its folder is a fresh 0755 folder under /tmp owned by that user (pytest's own
tmp folders are 0700 and not traversable by it). Stopped by PID: SIGTERM, then SIGKILL.

Its log is a signal to wait on: `start` returns once the port takes a connection,
`subscribed(client, topic)` tells a subscription is in place (a client such as mosquitto_sub
says nothing when it is), `refused_logins()` counts logins turned away.
"""

from __future__ import annotations

import os
import pwd
import re
import shutil
import signal
import socket
import subprocess
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import pytest

from tests.waiting import wait_until

MOSQUITTO = shutil.which("mosquitto") or (
    "/usr/sbin/mosquitto" if os.path.exists("/usr/sbin/mosquitto") else None
)
MOSQUITTO_PASSWD = shutil.which("mosquitto_passwd")
MOSQUITTO_SUB = shutil.which("mosquitto_sub")

USERS = {"kiln": "kiln-pass-7f3", "watcher": "watch pass with spaces"}


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


@dataclass
class Broker:
    folder: str
    port: int
    persistence: bool = False
    users: dict[str, str] = field(default_factory=lambda: dict(USERS))
    host: str = "127.0.0.1"
    process: subprocess.Popen | None = None
    tls: tuple[str, str, str] | None = None
    """(CA file, server certificate, server key): the listener speaks TLS only."""

    @property
    def config_path(self) -> str:
        return os.path.join(self.folder, "mosquitto.conf")

    @property
    def log_path(self) -> str:
        return os.path.join(self.folder, "mosquitto.log")

    def write_config(self) -> None:
        passwd = os.path.join(self.folder, "passwd")
        first = True
        for user, password in self.users.items():
            flags = ["-b", "-c"] if first else ["-b"]
            subprocess.run([MOSQUITTO_PASSWD, *flags, passwd, user, password], check=True,
                           capture_output=True)
            first = False
        lines = [
            f"listener {self.port} 127.0.0.1",
            *([f"cafile {self.tls[0]}", f"certfile {self.tls[1]}", f"keyfile {self.tls[2]}"]
              if self.tls else []),
            "allow_anonymous false",
            f"password_file {passwd}",
            "log_dest stderr",
            "log_type error",
            "log_type warning",
            "log_type notice",
            "log_type subscribe",  # `subscribed` reads these lines
        ]
        if self.persistence:
            lines += ["persistence true", f"persistence_location {self.folder}/",
                      "autosave_interval 0"]
        else:
            lines.append("persistence false")
        with open(self.config_path, "w", encoding="utf-8") as handle:
            handle.write("\n".join(lines) + "\n")
        if os.geteuid() == 0:
            # mosquitto drops to its own user: it must read the password file and (with
            # persistence) write its database here.
            entry = pwd.getpwnam("mosquitto")
            for path in (self.folder, passwd, self.config_path, *(self.tls or ())):
                os.chown(path, entry.pw_uid, entry.pw_gid)
            os.chmod(passwd, 0o600)

    def start(self, wait: float = 20.0) -> None:
        log = open(self.log_path, "ab")
        process = self.process = subprocess.Popen([MOSQUITTO, "-c", self.config_path],
                                                  stdout=log, stderr=log,
                                                  stdin=subprocess.DEVNULL)
        log.close()

        def listening() -> bool:
            if process.poll() is not None:
                raise RuntimeError(f"mosquitto exited at start:\n{self.read_log()}")
            try:
                with socket.create_connection((self.host, self.port), timeout=0.2):
                    return True
            except OSError:
                return False

        try:
            wait_until(listening, wait, f"mosquitto to open port {self.port}", every=0.02)
        except AssertionError:
            self.stop()
            raise RuntimeError(f"mosquitto did not open port {self.port}:\n"
                               f"{self.read_log()}") from None

    def stop(self) -> None:
        process, self.process = self.process, None
        if process is None or process.poll() is not None:
            return
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=3)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(timeout=3)

    def read_log(self) -> str:
        try:
            with open(self.log_path, encoding="utf-8", errors="replace") as handle:
                return handle.read()
        except OSError:
            return ""

    def subscribed(self, client_id: str, topic: str) -> bool:
        """The broker has `client_id`'s subscription to `topic` (its "subscribe" log line)."""
        # mosquitto logs "<time>: <client id> <QoS> <topic>" for each subscription
        line = re.compile(rf"^\d+: {re.escape(client_id)} [0-2] {re.escape(topic)}$", re.M)
        return line.search(self.read_log()) is not None

    def refused_logins(self) -> int:
        """Connections the broker turned away for a wrong or missing login, so far."""
        return self.read_log().count("disconnected, not authorised")

    def mqtt_table(self, password_file: str, **extra: object) -> dict[str, object]:
        """A kiln file's [mqtt] table pointing at this broker as the "kiln" user."""
        table: dict[str, object] = {"host": self.host, "port": self.port, "username": "kiln",
                                    "password_file": password_file, "keepalive": 5}
        table.update(extra)
        return table


def _need_mosquitto() -> None:
    if not MOSQUITTO or not MOSQUITTO_PASSWD:
        pytest.skip("mosquitto is not installed (Debian: apt-get install mosquitto "
                    "mosquitto-clients); the MQTT tests need a real broker")


@pytest.fixture
def mosquitto_factory() -> Iterator[Callable[..., Broker]]:
    """Make and start brokers (`persistence=True` keeps sessions across a restart)."""
    _need_mosquitto()
    made: list[Broker] = []

    def make(persistence: bool = False, tls: Callable[[str], tuple[str, str, str]] | None = None
             ) -> Broker:
        folder = tempfile.mkdtemp(prefix="tuikiln-mosquitto-")
        os.chmod(folder, 0o755)
        broker = Broker(folder=folder, port=free_port(), persistence=persistence,
                        tls=tls(folder) if tls else None)
        made.append(broker)
        broker.write_config()
        broker.start()
        return broker

    yield make
    for broker in made:
        broker.stop()
        shutil.rmtree(broker.folder, ignore_errors=True)


@pytest.fixture
def mosquitto(mosquitto_factory: Callable[..., Broker]) -> Broker:
    """A running broker (no persistence) that wants a login; see USERS."""
    return mosquitto_factory()
