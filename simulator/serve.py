"""`sim serve`: the simulated oven answering Modbus RTU on a pseudo-terminal or over TCP.

The first line on stdout is where to connect (the pty's path, or tcp://127.0.0.1:PORT), so
a script or test can start it and read one line. Messages go to stderr. Ctrl-C or SIGTERM
stop it; the simulated heater stops with it.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import signal
import sys
import time
import tomllib
import tty
from dataclasses import replace
from pathlib import Path

from tuikiln.simulator.config import SimConfig, check_sim_settings, parse_fault, suggest
from tuikiln.simulator.kiln import SimulatedKiln
from tuikiln.simulator.layouts import LAYOUTS
from tuikiln.simulator.modbus_rtu import RtuResponder

QUIET_S = 0.02  # a gap this long ends a frame whose length the function code does not tell
MAX_SPEED_SLICE_S = 300.0  # simulated seconds per pacer turn when running "as fast as possible"


def add_serve_arguments(parser: argparse.ArgumentParser) -> None:
    where = parser.add_mutually_exclusive_group()
    where.add_argument("--pty", action="store_true",
                       help="serve on a new pseudo-terminal and print its path (the default)")
    where.add_argument("--tcp", type=int, metavar="PORT",
                       help="serve RTU framing over TCP on 127.0.0.1:PORT (0: any free port)")
    parser.add_argument("--speed", metavar="N|max", help='time multiple, e.g. 60, or "max"')
    parser.add_argument("--layout", metavar="NAME",
                        help="where the controller keeps its values: "
                        f"{', '.join(LAYOUTS)} (default: the kiln file's [device] layout, "
                        "else sim; each has a map in drivers/maps/)")
    parser.add_argument("--baud", type=int, help="wire time to emulate (default 9600)")
    parser.add_argument("--address", type=int, help="Modbus device address (default 1)")
    parser.add_argument("--config", metavar="FILE",
                        help='kiln file with [device] kind = "sim" and its settings')
    parser.add_argument("--fault", action="append", default=[], metavar="KIND@AT[+FOR]",
                        help='schedule a fault, e.g. "door-open@20m+45s" (repeatable)')
    parser.add_argument("--seed", type=int, help="seed of the noise generator")
    parser.add_argument("--room", type=float, metavar="C", help="room temperature, °C")
    parser.add_argument("--load-thickness", type=float, metavar="MM",
                        help="thickness of the steel plate in the oven, mm")
    parser.add_argument("--no-load", action="store_true", help="an empty oven")
    parser.add_argument("--no-load-tc", action="store_true",
                        help="no thermocouple on the load (register 5 reads over-range)")
    parser.add_argument("--noise", type=float, metavar="C",
                        help="standard deviation of the readings' noise, °C")


class ServeError(Exception):
    """Bad options or settings, in plain words."""


def _locate(text: str, path: tuple[str | int, ...]) -> int | None:
    """Line (1-based) of a key path in a TOML text, by a light scan of headers and keys."""
    table: list[str] = []
    counts: dict[str, int] = {}
    want_table = [str(p) for p in path[:-1] if not isinstance(p, int)]
    want_index = next((p for p in path if isinstance(p, int)), None)
    key = str(path[-1]) if path else ""
    best: int | None = None
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if line.startswith("[["):
            table = line.strip("[] ").split(".")
            name = ".".join(table)
            counts[name] = counts.get(name, -1) + 1
            continue
        if line.startswith("["):
            table = line.strip("[] ").split(".")
            continue
        index_ok = want_index is None or counts.get(".".join(table), -1) == want_index
        if table == want_table and index_ok:
            if best is None and table:
                best = number
            if line.split("=", 1)[0].strip() == key:
                return number
    return best


def load_config(args: argparse.Namespace) -> SimConfig:
    """Settings from --config (or a sim kiln file) and the command-line options."""
    config = SimConfig()
    file = getattr(args, "config", None)
    from_kiln_option = False
    if file is None and getattr(args, "kiln", None):
        file, from_kiln_option = args.kiln, True
    if file:
        path = Path(file).expanduser()
        try:
            text = path.read_text(encoding="utf-8")
            table = tomllib.loads(text)
        except OSError as exc:
            raise ServeError(f"{path}: cannot read it ({exc.strerror or exc})") from None
        except UnicodeDecodeError as exc:
            raise ServeError(f"{path}: not UTF-8 text (byte {exc.start} cannot be read); "
                             "save it as UTF-8") from None
        except tomllib.TOMLDecodeError as exc:
            raise ServeError(f"{path}: not valid TOML: {exc}") from None
        except RecursionError:  # tomllib recurses once per nested array or inline table
            raise ServeError(f"{path}: not valid TOML: the file nests too deeply") from None
        except ValueError:  # e.g. an integer of more than 4300 digits (Python's int limit)
            raise ServeError(f"{path}: not valid TOML: a number is too long") from None
        device = table.get("device")
        if from_kiln_option and not (isinstance(device, dict) and device.get("kind") == "sim"):
            # --kiln names the user's real oven; serve the default simulator instead.
            print(f"sim: {path} is not a simulator kiln file; using the default simulator",
                  file=sys.stderr)
            table = {"device": {"kind": "sim"}}
        checked, problems = check_sim_settings(table)
        if problems or checked is None:
            lines = []
            for key_path, message in problems:
                line = _locate(text, key_path)
                where = f"{path}:{line}" if line else str(path)
                lines.append(f"{where}: {message}")
            raise ServeError("\n".join(lines))
        config = checked
    changes: dict[str, object] = {}
    if args.speed is not None:
        if args.speed == "max":
            changes["speed"] = None
        else:
            try:
                speed = float(args.speed)
            except ValueError:
                speed = -1.0
            if not 0 < speed <= 1e6:
                raise ServeError(f'--speed needs a number above 0 or "max", not "{args.speed}"')
            changes["speed"] = speed
    for name in ("baud", "address", "seed"):
        value = getattr(args, name)
        if value is not None:
            changes[name] = value
    if args.baud is not None and not 300 <= args.baud <= 1_000_000:
        raise ServeError(f"--baud needs a rate from 300 to 1000000, not {args.baud}")
    if args.address is not None and not 1 <= args.address <= 247:
        raise ServeError(f"--address needs 1 to 247, not {args.address}")
    if args.room is not None:
        changes["room_c"] = args.room
    if args.noise is not None:
        if args.noise < 0:
            raise ServeError("--noise needs zero or more degrees")
        changes["noise_c"] = changes["load_noise_c"] = args.noise
    faults = list(config.faults)
    for text in args.fault:
        try:
            faults.append(parse_fault(text))
        except ValueError as exc:
            raise ServeError(f"--fault {exc}") from None
    changes["faults"] = tuple(faults)
    if args.load_thickness is not None:
        if not 0.01 <= args.load_thickness <= 1000:
            raise ServeError("--load-thickness needs millimetres from 0.01 to 1000")
        if config.load is not None:
            changes["load"] = replace(config.load, thickness_m=args.load_thickness / 1000.0)
    if args.no_load:
        changes["load"] = None
        changes["load_thermocouple"] = False
    if args.no_load_tc:
        changes["load_thermocouple"] = False
    return replace(config, **changes)  # type: ignore[arg-type]


async def pace(kiln: SimulatedKiln, speed: float | None, stop: asyncio.Event) -> None:
    """Move the simulation on against the wall clock (or as fast as possible)."""
    last = time.monotonic()
    while not stop.is_set():
        if speed is None:
            kiln.advance(MAX_SPEED_SLICE_S)
            await asyncio.sleep(0.001)
            continue
        await asyncio.sleep(0.05)
        now = time.monotonic()
        kiln.advance((now - last) * speed)
        last = now


class LineServer:
    """Feeds bytes from one line (pty or TCP connection) to the responder, in order."""

    def __init__(self, responder: RtuResponder, write: object) -> None:
        self.responder = responder
        self.write = write
        self.buffer = bytearray()
        self.queue: asyncio.Queue[bytes] = asyncio.Queue()
        self._flush_handle: asyncio.TimerHandle | None = None

    def received(self, data: bytes) -> None:
        self.buffer.extend(data)
        self._take(flush=False)
        loop = asyncio.get_running_loop()
        if self._flush_handle is not None:
            self._flush_handle.cancel()
        if self.buffer:
            self._flush_handle = loop.call_later(QUIET_S, self._take, True)

    def _take(self, flush: bool) -> None:
        for frame in self.responder.split_frames(self.buffer, flush=flush):
            self.queue.put_nowait(frame)

    async def run(self) -> None:
        # One request at a time, as on a real half-duplex line.
        while True:
            frame = await self.queue.get()
            reply = self.responder.reply(frame)
            await asyncio.sleep(self.responder.reply_delay(frame, reply))
            if reply:
                try:
                    self.write(reply)  # type: ignore[operator]
                except OSError:
                    pass


async def serve_pty(responder: RtuResponder, stop: asyncio.Event) -> None:
    master, slave = os.openpty()
    tty.setraw(slave)  # no echo, no line editing: bytes pass as they are
    os.set_blocking(master, False)
    path = os.ttyname(slave)
    loop = asyncio.get_running_loop()

    def write(data: bytes) -> None:
        os.write(master, data)

    line = LineServer(responder, write)

    def readable() -> None:
        try:
            data = os.read(master, 4096)
        except (BlockingIOError, InterruptedError):
            return
        except OSError:
            return  # no client has the slave open right now; our own copy keeps it alive
        if data:
            line.received(data)

    loop.add_reader(master, readable)
    print(path, flush=True)
    task = asyncio.create_task(line.run())
    try:
        await stop.wait()
    finally:
        loop.remove_reader(master)
        task.cancel()
        os.close(master)
        os.close(slave)


async def serve_tcp(responder: RtuResponder, port: int, stop: asyncio.Event) -> None:
    async def client(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        line = LineServer(responder, writer.write)
        task = asyncio.create_task(line.run())
        try:
            while data := await reader.read(4096):
                line.received(data)
        except ConnectionError:
            pass
        finally:
            task.cancel()
            writer.close()

    server = await asyncio.start_server(client, "127.0.0.1", port)
    bound = server.sockets[0].getsockname()[1]
    print(f"tcp://127.0.0.1:{bound}", flush=True)
    async with server:
        await stop.wait()


async def serve(config: SimConfig, tcp_port: int | None = None, layout: str = "sim") -> None:
    kiln = SimulatedKiln(config)
    personality = LAYOUTS[layout]()
    responder = RtuResponder(kiln, address=config.address, baud=config.baud,
                             layout=personality)
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGINT, signal.SIGTERM):
        loop.add_signal_handler(sig, stop.set)
    pacer = asyncio.create_task(pace(kiln, config.speed, stop))
    speed = "as fast as possible" if config.speed is None else f"{config.speed:g}x real time"
    print(f"sim: device {config.address}, layout {layout}, {config.baud} baud emulated, {speed}; "
          "Ctrl-C stops (the simulated heater stops too)", file=sys.stderr, flush=True)
    try:
        if tcp_port is None:
            await serve_pty(responder, stop)
        else:
            await serve_tcp(responder, tcp_port, stop)
    finally:
        kiln.set_running(False)
        pacer.cancel()
    print(f"sim: stopped at {kiln.time_s:.0f} s simulated, chamber {kiln.truth.chamber_c:.1f} °C, "
          f"setpoint written {personality.setpoint_writes} times", file=sys.stderr, flush=True)


def main(args: argparse.Namespace, prog: str = "sim") -> int:
    """Run `serve` from parsed options; bad input gives a message and exit code 2."""
    asked = getattr(args, "layout", None)
    try:
        if asked is not None and asked not in LAYOUTS:
            maybe = suggest(asked, list(LAYOUTS), cutoff=0.6)
            raise ServeError(f'--layout "{asked}" is not known{maybe}; '
                             f"choose one of {', '.join(LAYOUTS)}")
        config = load_config(args)
    except ServeError as exc:
        for line in str(exc).splitlines():
            print(f"{prog}: {line}", file=sys.stderr)
        return 2
    layout = asked or config.layout  # the command line overrides the kiln file
    try:
        asyncio.run(serve(config, args.tcp, layout))
    except OSError as exc:
        print(f"{prog}: cannot serve: {exc.strerror or exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        pass
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="python -m tuikiln.simulator.serve", description=__doc__)
    add_serve_arguments(parser)
    return parser


if __name__ == "__main__":
    raise SystemExit(main(build_parser().parse_args()))
