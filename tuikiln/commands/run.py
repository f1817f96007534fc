"""`tuikiln run PROFILE`: run a heat treatment.

With --headless the run goes on in this process, in the foreground, printing a line per step,
alarm and event (for SSH sessions and services). Without it the run is started in the
background, as its own process that outlives this command and the terminal; this command
returns once the run is up. Watch it with `tuikiln status`, steer it with `tuikiln pause`,
`resume`, `skip`, `ack`, `note`, `abort`.

Exit status of a headless run (documented in `tuikiln run --help`):
0 completed, 1 a mistake in the files or options, 2 aborted or stopped by a signal,
3 stopped by an alarm, 4 unable to start (device not reachable, kiln busy), 5 engine failure.

`--resume` carries on the kiln's unfinished run (its engine was killed, the power was cut,
the machine rebooted) per the kiln file's `on_restart` (tuikiln/engine/recovery.py), in the
same run of the log. With no unfinished run it starts PROFILE if one is given, else says
there is nothing to resume and exits 0: `tuikiln run --resume --headless` is what a service
runs at boot. A resumed run that ends per `on_restart = "end"` exits 2.

Under a service manager (systemd sets INVOCATION_ID) SIGTERM drives the device safe and
leaves the run unfinished, so a reboot or `systemctl stop` is carried on at the next start;
elsewhere SIGTERM, SIGHUP and Ctrl-C end the run.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tuikiln.errors import UserError
from tuikiln.units import format_duration, format_temp

if TYPE_CHECKING:
    from tuikiln.engine.runner import RunSettings

EXIT_COMPLETED = 0
EXIT_ABORTED = 2
EXIT_ALARM = 3
EXIT_CANNOT_START = 4
EXIT_ENGINE_FAILED = 5
START_WAIT_S = 20.0


class CannotStart(UserError):
    exit_code = EXIT_CANNOT_START


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", nargs="?", default=None,
                        help="the profile file (TOML); optional with --resume")
    parser.add_argument("--resume", action="store_true",
                        help="carry on the kiln's unfinished run (after a crash, power cut or "
                        "reboot) as the kiln file's on_restart says; with none, start PROFILE "
                        "or exit 0")
    parser.add_argument("--speed", metavar="N|max", default=None,
                        help="simulator only: run N times faster than real time, or as fast "
                        "as it goes (max)")
    parser.add_argument("--at-step", dest="from_step", metavar="STEP", type=int, default=None,
                        help="start at this step (1 = the first); a hold or pause there keeps "
                        "the temperature the steps before it lead to")
    parser.add_argument("--headless", action="store_true",
                        help="run in the foreground without a screen, a line per event")
    parser.add_argument("--auto-continue", action="store_true",
                        help="simulator only: acknowledge pause steps at once (for trials)")
    parser.add_argument("--no-screen", action="store_true",
                        help="start the run in the background without opening the live screen "
                        "(the screen opens only in an interactive terminal anyway)")
    parser.add_argument("--detached", action="store_true", help=argparse.SUPPRESS)
    parser.epilog = ("exit status: 0 completed, 1 mistake in the files or options, "
                     "2 aborted or stopped by a signal, 3 stopped by an alarm, "
                     "4 unable to start, 5 engine failure")


def parse_speed(text: str | None, is_simulator: bool) -> float | None:
    """None: the kiln file's speed; 0.0: as fast as possible; else a multiple."""
    if text is None:
        return None
    if not is_simulator:
        raise UserError("--speed works only with the built-in simulator: a real oven runs in "
                        "real time")
    if text.strip().lower() == "max":
        return 0.0
    try:
        value = float(text)
    except ValueError:
        raise UserError(f'--speed needs a number such as 60, or "max", not "{text}"') from None
    if not value > 0:
        raise UserError("--speed must be more than zero (or max)")
    return value


def _prepare(args: argparse.Namespace) -> tuple[Any, Any, float | None, int]:
    from tuikiln.kiln import load_kiln
    from tuikiln.profile import load_profile

    kiln = load_kiln(args.kiln)
    profile = load_profile(args.profile, max_c=kiln.max_c)
    speed = parse_speed(args.speed, kiln.is_simulator)
    if args.auto_continue and not kiln.is_simulator:
        raise UserError("--auto-continue works only with the built-in simulator: on a real "
                        "oven a person must answer each pause")
    start_index = 0
    if args.from_step is not None:
        if not 1 <= args.from_step <= len(profile.steps):
            raise UserError(f"--at-step must be a step number from 1 to {len(profile.steps)}")
        start_index = args.from_step - 1
    return kiln, profile, speed, start_index


def _prepare_resume(args: argparse.Namespace, data_dir: Path) -> tuple[Any, Any, Any] | None:
    """(kiln, profile, ResumePlan) for the kiln's unfinished run, or None when there is none."""
    from tuikiln.engine.recovery import find_unfinished, plan_resume
    from tuikiln.errors import FileProblems
    from tuikiln.kiln import load_kiln
    from tuikiln.profile import parse_profile
    from tuikiln.runlog import RUNLOG_NAME, RunLog

    if args.from_step is not None:
        raise UserError("--at-step and --resume do not go together: a resumed run carries on "
                        "where it was")
    kiln = load_kiln(args.kiln)
    if not (data_dir / RUNLOG_NAME).exists():
        return None
    runlog = RunLog.in_folder(data_dir)
    try:
        info = find_unfinished(runlog, kiln.name)
        if info is None:
            return None
        where = info.profile_path or f"run {info.id}'s profile"
        try:
            profile = parse_profile(info.profile_text, where, max_c=kiln.max_c)
        except FileProblems as exc:
            raise UserError(f"run {info.id} cannot be carried on: its logged profile no longer "
                            f"checks ({exc}). End it with `tuikiln run --resume` after setting "
                            'on_restart = "end", or start a new run') from None
        return kiln, profile, plan_resume(runlog, info, kiln.on_restart, now=time.time())
    finally:
        runlog.close()


def run(args: argparse.Namespace) -> int:
    from tuikiln.runlog import default_data_dir

    data_dir = default_data_dir(args.data)
    if args.resume:
        prepared = _prepare_resume(args, data_dir)
        if prepared is not None:
            kiln, profile, plan = prepared
            speed = parse_speed(args.speed, kiln.is_simulator)
            if args.headless:
                from tuikiln.engine.host import settings_for

                settings = settings_for(kiln, profile, speed=args.speed or "",
                                        auto_continue=args.auto_continue)
                return asyncio.run(run_headless(kiln, profile, data_dir, settings, speed=speed,
                                                resume=plan))
            return start_background(args, kiln, profile, data_dir)
        if args.profile is None:
            print("Nothing to resume: no unfinished run for this kiln "
                  f"(data folder {data_dir}).")
            return EXIT_COMPLETED
    if args.profile is None:
        raise UserError("say which profile to run: tuikiln run PROFILE (or `tuikiln run "
                        "--resume` to carry on an unfinished run)")
    kiln, profile, speed, start_index = _prepare(args)
    if args.headless:
        from tuikiln.engine.host import settings_for

        settings = settings_for(kiln, profile, start_index=start_index, speed=args.speed or "",
                                auto_continue=args.auto_continue)
        return asyncio.run(run_headless(kiln, profile, data_dir, settings, speed=speed))
    return start_background(args, kiln, profile, data_dir)


# ----- what will happen -----


def plan_lines(profile: Any, kiln: Any, start_c: float | None, device_words: str,
               speed: float | None, simulated: bool) -> list[str]:
    from tuikiln.plan import plan_profile
    from tuikiln.profile import describe_step

    u = kiln.units
    plan = plan_profile(profile, start_c if start_c is not None else 20.0)
    more = " or more" if plan.open_ended else ""
    lines = [f"Profile: {profile.name} ({len(profile.steps)} steps, "
             f"{format_duration(plan.total_s)}{more}, peak {format_temp(plan.peak_c, u)})"]
    for i, step in enumerate(profile.steps):
        label = f" ({step.label})" if step.label else ""
        lines.append(f"  {i + 1}. {describe_step(step, u)}{label}")
    lines.append(f"Kiln: {kiln.name}, maximum {format_temp(kiln.max_c, u)}")
    lines.append(f"Device: {device_words}")
    if start_c is not None:
        lines.append(f"Now: {format_temp(start_c, u)}")
    if simulated and speed is not None and speed != 1.0:
        lines.append(f"Simulated: about {format_duration(plan.total_s)}{more} of simulated time")
    else:
        end = time.strftime("%a %H:%M", time.localtime(time.time() + plan.total_s))
        lines.append(f"Nominal end: {end}{' at the earliest' if plan.open_ended else ''}")
    lines.append("Caution: tuikiln is not a safety device; the oven needs an independent "
                 "over-temperature limit.")
    return lines


# ----- background -----


def start_background(args: argparse.Namespace, kiln: Any, profile: Any, data_dir: Path) -> int:
    from tuikiln import control
    from tuikiln.runlog import open_private, private_folder

    lock = control.KilnLock(data_dir, kiln.name)
    lock.acquire()  # fails at once, in plain words, if a run is already going on
    lock.release()
    logs = data_dir / "logs"
    private_folder(logs)
    log_path = logs / f"run-{time.strftime('%Y%m%d-%H%M%S')}-{os.getpid()}.log"
    command = [sys.executable, "-m", "tuikiln", "run"]
    if args.profile is not None:
        command.append(str(Path(args.profile).resolve()))
    if args.resume:
        command.append("--resume")
    command += ["--headless", "--detached", "--data", str(data_dir.resolve())]
    if args.kiln:
        command += ["--kiln", str(Path(args.kiln).resolve())]
    if args.speed is not None:
        command += ["--speed", str(args.speed)]
    if args.from_step is not None:
        command += ["--at-step", str(args.from_step)]
    if args.auto_continue:
        command.append("--auto-continue")
    with open_private(log_path) as log_file:
        child = subprocess.Popen(command, stdin=subprocess.DEVNULL, stdout=log_file,
                                 stderr=subprocess.STDOUT, start_new_session=True,
                                 cwd=str(Path.cwd()))
    deadline = time.monotonic() + START_WAIT_S
    while time.monotonic() < deadline:
        code = child.poll()
        if code is not None:
            if code == 0:
                print(f"The run finished already (a fast simulation). Log: {log_path}")
                return 0
            tail = log_path.read_text(errors="replace").strip().splitlines()[-15:]
            print("\n".join(tail), file=sys.stderr)
            print(f"tuikiln: the run did not start (log: {log_path})", file=sys.stderr)
            return code
        for active in control.active_runs(data_dir):
            if active.pid == child.pid:
                code = _announce(active, kiln, profile, log_path,
                                 parse_speed(args.speed, kiln.is_simulator))
                if code == 0 and not args.no_screen and _interactive():
                    return _attach_screen(args, data_dir)
                return code
        time.sleep(0.05)
    print(f"tuikiln: the run is taking long to start; see {log_path} and `tuikiln status`",
          file=sys.stderr)
    return EXIT_CANNOT_START


def _interactive() -> bool:
    return sys.stdin.isatty() and sys.stdout.isatty() and sys.stderr.isatty()


def _attach_screen(args: argparse.Namespace, data_dir: Path) -> int:
    """The live screen on the run just started; leaving it leaves the run going."""
    from tuikiln import logsetup
    from tuikiln.commands import watch

    logsetup.to_file(data_dir)  # the screen draws on the standard error
    time.sleep(0.3)  # let the run write its first samples
    return watch.run(argparse.Namespace(data=str(data_dir), kiln=args.kiln, units=None,
                                        no_bell=False))


def _announce(active: Any, kiln: Any, profile: Any, log_path: Path,
              speed: float | None) -> int:
    from tuikiln import control

    status: dict[str, Any] = {}
    with contextlib.suppress(UserError, OSError, ValueError):
        status = control.request(active.socket, "status").get("status", {})
    simulated = kiln.is_simulator
    for line in plan_lines(profile, kiln, status.get("chamber_c"), "running in the background",
                           speed, simulated):
        print(line)
    print(f"Started run {active.run} in the background (process {active.pid}); it goes on "
          "when this terminal closes.")
    print("Watch it: tuikiln status   Steer it: tuikiln pause | resume | skip | ack | note | "
          "abort")
    print(f"Its log: {log_path}")
    return 0


# ----- headless -----


async def run_headless(kiln: Any, profile: Any, data_dir: Path, settings: RunSettings, *,
                       speed: float | None, resume: Any = None) -> int:
    """The run in this process: `settings` (tuikiln.engine.host.settings_for) are the
    engine's, `speed` the simulator's (None: the kiln file's)."""
    from tuikiln import control
    from tuikiln.drivers.errors import DeviceError
    from tuikiln.drivers.factory import open_device
    from tuikiln.engine import states as st
    from tuikiln.engine.host import host_engine

    out = sys.stdout
    lock = control.KilnLock(data_dir, kiln.name)
    lock.acquire()
    try:
        try:
            device = open_device(kiln.device, kiln.base_dir, speed=speed)
        except DeviceError as exc:
            raise CannotStart(f"cannot open the device: {exc}") from exc
        try:
            await device.connect()
        except DeviceError as exc:
            hint = f"\n  {exc.hint}" if exc.hint else ""
            raise CannotStart(f"cannot reach the device ({device.description}): {exc}{hint}"
                              ) from exc
        try:
            start_c = await _first_temperature(device)
            for line in plan_lines(profile, kiln, start_c, device.description, speed,
                                   kiln.is_simulator):
                print(line, file=out, flush=True)
            if resume is not None:
                print(f"Resuming run {resume.run.id} after {format_duration(resume.away_s)} "
                      f'away: on_restart = "{resume.policy}"'
                      + (f" ({resume.why})" if resume.why else ""), file=out, flush=True)
            if not device.capabilities.can_write_setpoint:
                print("Watching only: this device cannot take a setpoint, so tuikiln follows "
                      "the plan and tells you what the oven should be doing.", file=out,
                      flush=True)
            engine = host_engine(kiln, profile, device, data_dir, settings, terminal=out,
                                 resume=resume)
            sinks = engine.sinks
            return await _serve_run(engine, kiln, data_dir, sinks, out, st)
        finally:
            await device.close()
    finally:
        lock.release()


async def _first_temperature(device: Any) -> float | None:
    from tuikiln.drivers.errors import DeviceError, SensorFault

    last: Exception | None = None
    for _ in range(3):
        try:
            reading = await device.read()
        except SensorFault as exc:
            raise CannotStart(f"the thermocouple reads a fault: {exc}") from exc
        except DeviceError as exc:
            last = exc
            await asyncio.sleep(0.5)
            continue
        if reading.sensor_fault or reading.chamber_c is None:
            raise CannotStart("the thermocouple reads a fault (open or out of range): check "
                              "it before starting")
        return reading.chamber_c
    raise CannotStart(f"the device does not answer: {last}")


async def _serve_run(engine: Any, kiln: Any, data_dir: Path, sinks: list[Any], out: Any,
                     st: Any) -> int:
    from tuikiln import control
    from tuikiln.engine.states import ENDED_AFTER_RESTART

    loop = asyncio.get_running_loop()
    under_service = bool(os.environ.get("INVOCATION_ID"))
    for signum in (signal.SIGTERM, signal.SIGHUP, signal.SIGINT):
        with contextlib.suppress(NotImplementedError, RuntimeError):
            if signum == signal.SIGTERM and under_service:
                loop.add_signal_handler(signum, engine.request_suspend,
                                        "the service is stopping (SIGTERM)")
            else:
                loop.add_signal_handler(signum, engine.request_stop, st.STOPPED_BY_SIGNAL,
                                        f"stopped by {signal.Signals(signum).name}")
    server = control.ControlServer(engine, control.socket_path(data_dir, kiln.name))
    for sink in sinks:
        with contextlib.suppress(Exception):
            await sink.start()
    await server.start()
    active = None
    try:
        run_task = asyncio.create_task(engine.run())
        while engine.run_id is None and not run_task.done():
            await asyncio.sleep(0)
        active = control.write_active(data_dir, kiln.name, {
            "kiln": kiln.name, "pid": os.getpid(), "run": engine.run_id,
            "socket": str(server.path), "profile": engine.profile.name,
            "started": time.time()})
        try:
            outcome = await run_task
        except UserError:
            raise  # one line from the command line (a full data folder at a restart, say)
        except Exception:
            print(f"tuikiln: {engine.end_words or 'the engine failed'}", file=sys.stderr)
            return EXIT_ENGINE_FAILED
        return {st.COMPLETED: EXIT_COMPLETED, st.ABORTED: EXIT_ABORTED,
                st.STOPPED_BY_SIGNAL: EXIT_ABORTED, st.STOPPED_BY_ALARM: EXIT_ALARM,
                ENDED_AFTER_RESTART: EXIT_ABORTED, "suspended": EXIT_ABORTED,
                }.get(outcome, EXIT_ENGINE_FAILED)
    finally:
        server.notify_end(engine.outcome or "")
        await asyncio.sleep(0)
        if active is not None:
            with contextlib.suppress(OSError):
                active.unlink()
        await server.close()
        for sink in sinks:
            with contextlib.suppress(Exception):
                await asyncio.wait_for(sink.stop(), 20.0)
        for signum in (signal.SIGTERM, signal.SIGHUP, signal.SIGINT):
            with contextlib.suppress(NotImplementedError, RuntimeError):
                loop.remove_signal_handler(signum)
