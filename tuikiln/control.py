"""The local control socket: how a second command (or a screen) talks to a running run.

The engine process listens on a Unix socket (mode 0600, in `<data>/control/`, or in a
private folder under the temporary directory when that path would be too long for a socket
address); a peer whose user id differs from ours (SO_PEERCRED) is refused. Each line, both
ways, is one JSON object:

    -> {"cmd": "status"}                     <- {"ok": true, "status": {...}}
    -> {"cmd": "pause"}                      <- {"ok": true, "message": "...", "status": {...}}
    -> {"cmd": "ack", "arg": "too-hot"}      (also resume, skip, abort, note with "arg")
    -> {"cmd": "subscribe"}                  <- {"ok": true, "status": {...}}, then one line
                                                per event {"event": {...}} and status change
                                                {"status": {...}} (about once a second),
                                                and {"end": "completed"} when the run ends

A live screen can either subscribe here or read the SQLite run log (both work; the log is
the complete record, the socket is the quick one).

Each running kiln also has a small "active run" file `<data>/active/<kiln>.json` (pid, run
id, socket path) and holds an exclusive flock on `<data>/locks/<kiln>.lock`: one run per
kiln at a time.
"""

from __future__ import annotations

import asyncio
import contextlib
import fcntl
import hashlib
import json
import os
import re
import socket
import stat
import struct
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from tuikiln.errors import UserError
from tuikiln.runlog import open_private, pid_alive, private_folder

MAX_LINE = 64 * 1024
SOCKET_PATH_MAX = 100  # sun_path is 108 bytes on Linux; keep a margin
SUBSCRIBER_QUEUE = 2000
# A local program opening connections and leaving them idle would use up the engine's file
# descriptors (and with them the log and the device): cap them, and close idle ones.
MAX_CLIENTS = 32
IDLE_S = 60.0


class KilnBusy(UserError):
    exit_code = 4


class NoRun(UserError):
    """No run is going on (or none for the kiln asked for)."""


def kiln_slug(name: str) -> str:
    slug = re.sub(r"[^a-z0-9]+", "-", name.lower()).strip("-")
    return slug or "kiln"


def socket_path(data_dir: Path, kiln_name: str) -> Path:
    slug = kiln_slug(kiln_name)
    path = data_dir / "control" / f"{slug}.sock"
    if len(str(path)) <= SOCKET_PATH_MAX:
        return path
    digest = hashlib.sha1(f"{data_dir.resolve()}|{slug}".encode()).hexdigest()[:16]
    return Path(tempfile.gettempdir()) / f"tuikiln-{os.getuid()}" / f"{digest}.sock"


def check_private(path: Path, what: str) -> None:
    """Refuse a socket or its folder unless it is ours and closed to others: in a shared
    temporary folder another user could have made it first and put a fake engine there."""
    try:
        info = os.lstat(path)
    except OSError as exc:
        raise NoRun(f"cannot check the {what} {path}: {exc.strerror or exc}") from exc
    if stat.S_ISLNK(info.st_mode):
        problem = "is a symbolic link"
    elif info.st_uid != os.getuid():
        problem = f"belongs to another user (uid {info.st_uid})"
    elif info.st_mode & 0o077:
        problem = f"is open to other users (mode {stat.S_IMODE(info.st_mode):o})"
    else:
        return
    raise UserError(f"refusing the {what} {path}: it {problem}; remove it (or ask whoever "
                    "made it to) and try again")


def active_path(data_dir: Path, kiln_name: str) -> Path:
    return data_dir / "active" / f"{kiln_slug(kiln_name)}.json"


# ----- one run per kiln -----


class KilnLock:
    """An exclusive flock held for the whole run (released by the kernel if we die)."""

    def __init__(self, data_dir: Path, kiln_name: str) -> None:
        self.path = data_dir / "locks" / f"{kiln_slug(kiln_name)}.lock"
        self.kiln_name = kiln_name
        self._fd: int | None = None

    def acquire(self) -> None:
        private_folder(self.path.parent)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o600)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise KilnBusy(f'a run is already going on for "{self.kiln_name}": see '
                           "`tuikiln status`, or end it with `tuikiln abort`") from None
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode())
        self._fd = fd

    def release(self) -> None:
        if self._fd is not None:
            with contextlib.suppress(OSError):
                fcntl.flock(self._fd, fcntl.LOCK_UN)
                os.close(self._fd)
            self._fd = None

    def __enter__(self) -> KilnLock:
        self.acquire()
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()


# ----- finding running runs -----


@dataclass(frozen=True)
class ActiveRun:
    kiln: str
    pid: int
    run: int | None
    socket: str
    profile: str
    file: Path


def write_active(data_dir: Path, kiln_name: str, info: dict[str, Any]) -> Path:
    path = active_path(data_dir, kiln_name)
    private_folder(path.parent)
    tmp = path.with_suffix(".tmp")
    with open_private(tmp, "w") as out:
        out.write(json.dumps(info))
    os.replace(tmp, path)
    return path


def _alive(pid: int) -> bool:
    return pid_alive(pid)


def active_runs(data_dir: Path) -> list[ActiveRun]:
    """Runs whose engine process is alive (stale files of dead engines are ignored)."""
    folder = data_dir / "active"
    found: list[ActiveRun] = []
    if not folder.is_dir():
        return found
    for file in sorted(folder.glob("*.json")):
        try:
            info = json.loads(file.read_text())
            run = ActiveRun(str(info["kiln"]), int(info["pid"]), info.get("run"),
                            str(info["socket"]), str(info.get("profile", "")), file)
        except (OSError, ValueError, KeyError, TypeError):
            continue
        if _alive(run.pid):
            found.append(run)
    return found


def pick_run(data_dir: Path, kiln_name: str | None = None) -> ActiveRun:
    runs = active_runs(data_dir)
    if kiln_name is not None:
        runs = [r for r in runs if kiln_slug(r.kiln) == kiln_slug(kiln_name)]
    if not runs:
        where = f' for "{kiln_name}"' if kiln_name else ""
        raise NoRun(f"no run is going on{where} (data folder {data_dir}); start one with "
                    "`tuikiln run PROFILE`")
    if len(runs) > 1:
        names = ", ".join(f'"{r.kiln}"' for r in runs)
        raise NoRun(f"runs are going on for several kilns ({names}): say which with --kiln FILE")
    return runs[0]


# ----- server (in the engine process) -----


class ControlServer:
    """Serves one RunEngine (anything with `command`, `status` and `listeners`)."""

    def __init__(self, engine: Any, path: Path) -> None:
        self.engine = engine
        self.path = path
        self._server: asyncio.AbstractServer | None = None
        self._clients: set[asyncio.Task[Any]] = set()

    async def start(self) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
        with contextlib.suppress(OSError):
            os.chmod(self.path.parent, 0o700)
        check_private(self.path.parent, "control-socket folder")
        if self.path.exists() or self.path.is_symlink():
            self.path.unlink()  # we hold the kiln lock: any socket here is a dead run's
        old = os.umask(0o177)
        try:
            self._server = await asyncio.start_unix_server(self._serve, path=str(self.path),
                                                           limit=MAX_LINE)
        finally:
            os.umask(old)
        os.chmod(self.path, 0o600)

    async def close(self) -> None:
        if self._server is not None:
            self._server.close()
            for task in list(self._clients):
                task.cancel()
            with contextlib.suppress(Exception):
                await asyncio.wait_for(self._server.wait_closed(), 2.0)
            self._server = None
        with contextlib.suppress(OSError):
            self.path.unlink()

    def notify_end(self, outcome: str) -> None:
        for listener in list(self.engine.listeners):
            with contextlib.suppress(Exception):
                listener("end", {"outcome": outcome})

    async def _serve(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        task = asyncio.current_task()
        if task is not None:
            self._clients.add(task)
        try:
            if not _same_user(writer):
                await _send(writer, {"ok": False, "error": "refused: another user"})
                return
            if len(self._clients) > MAX_CLIENTS:
                await _send(writer, {"ok": False, "error": f"refused: {MAX_CLIENTS} "
                                     "connections are open already"})
                return
            while True:
                try:
                    line = await asyncio.wait_for(reader.readline(), IDLE_S)
                except TimeoutError:
                    await _send(writer, {"ok": False, "error": f"closed: idle {IDLE_S:.0f} s"})
                    return
                except (ValueError, asyncio.LimitOverrunError):
                    await _send(writer, {"ok": False, "error": "line too long"})
                    return
                if not line:
                    return
                try:
                    request = json.loads(line)
                    if not isinstance(request, dict):
                        raise ValueError("not an object")
                except (ValueError, RecursionError):  # RecursionError: absurdly deep nesting
                    await _send(writer, {"ok": False, "error": "each line must be a JSON "
                                         'object such as {"cmd": "status"}'})
                    continue
                cmd = str(request.get("cmd", ""))
                if cmd == "subscribe":
                    await self._subscribe(writer)
                    return
                await _send(writer, self.handle(cmd, request.get("arg")))
        except (ConnectionError, asyncio.CancelledError):
            pass
        finally:
            if task is not None:
                self._clients.discard(task)
            with contextlib.suppress(Exception):
                writer.close()

    def handle(self, cmd: str, arg: Any) -> dict[str, Any]:
        if cmd == "status":
            return {"ok": True, "status": self.engine.status()}
        if cmd in ("pause", "resume", "skip", "abort", "ack", "note"):
            text = None if arg is None else str(arg)
            result = self.engine.command(cmd, text, "command")
            return {**result, "status": self.engine.status()}
        return {"ok": False, "error": f'unknown command "{cmd}"'}

    async def _subscribe(self, writer: asyncio.StreamWriter) -> None:
        queue: asyncio.Queue[tuple[str, Any]] = asyncio.Queue(SUBSCRIBER_QUEUE)

        def listener(kind: str, payload: Any) -> None:
            with contextlib.suppress(asyncio.QueueFull):
                queue.put_nowait((kind, payload))

        self.engine.listeners.append(listener)
        try:
            await _send(writer, {"ok": True, "status": self.engine.status()})
            while True:
                kind, payload = await queue.get()
                if kind == "end":
                    await _send(writer, {"end": payload.get("outcome")})
                    return
                await _send(writer, {kind: payload})
        finally:
            with contextlib.suppress(ValueError):
                self.engine.listeners.remove(listener)


def _same_user(writer: asyncio.StreamWriter) -> bool:
    sock = writer.get_extra_info("socket")
    if sock is None or not hasattr(socket, "SO_PEERCRED"):
        return True  # not Linux: the 0600 mode of the socket file is the guard
    creds = sock.getsockopt(socket.SOL_SOCKET, socket.SO_PEERCRED, struct.calcsize("3i"))
    _pid, uid, _gid = struct.unpack("3i", creds)
    return uid == os.getuid()


async def _send(writer: asyncio.StreamWriter, message: dict[str, Any]) -> None:
    writer.write(json.dumps(message, default=str).encode() + b"\n")
    await writer.drain()


# ----- client (another process) -----


def _connect(path: str, timeout: float) -> socket.socket:
    check_private(Path(path).parent, "control-socket folder")
    check_private(Path(path), "control socket")
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    sock.settimeout(timeout)
    try:
        sock.connect(path)
    except OSError as exc:
        sock.close()
        raise NoRun(f"the run's control socket does not answer ({exc}); the run may have just "
                    "ended: see `tuikiln runs`") from exc
    return sock


def _lines(sock: socket.socket) -> Iterator[dict[str, Any]]:
    buffer = b""
    while True:
        chunk = sock.recv(65536)
        if not chunk:
            return
        buffer += chunk
        while b"\n" in buffer:
            line, buffer = buffer.split(b"\n", 1)
            if line.strip():
                yield json.loads(line)


def request(path: str, cmd: str, arg: str | None = None, timeout: float = 10.0
            ) -> dict[str, Any]:
    """Send one command to a running run; returns its answer."""
    sock = _connect(path, timeout)
    try:
        message: dict[str, Any] = {"cmd": cmd}
        if arg is not None:
            message["arg"] = arg
        sock.sendall(json.dumps(message).encode() + b"\n")
        for answer in _lines(sock):
            return answer
        raise NoRun("the run closed the control socket without answering")
    except TimeoutError as exc:
        raise NoRun("the run did not answer within "
                    f"{timeout:.0f} s") from exc
    except (ConnectionError, ValueError) as exc:
        raise NoRun(f"the run's control socket broke off ({exc}); the run may have just "
                    "ended: see `tuikiln runs`") from exc
    finally:
        sock.close()


def subscribe(path: str, timeout: float | None = None) -> Iterator[dict[str, Any]]:
    """Status and event lines from a running run until it ends or the socket closes."""
    sock = _connect(path, 10.0)
    sock.settimeout(timeout)
    try:
        sock.sendall(b'{"cmd": "subscribe"}\n')
        yield from _lines(sock)
    finally:
        sock.close()
