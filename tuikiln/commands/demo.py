"""`tuikiln demo`: a whole harden-and-temper cycle on the built-in simulator, sped up.

The simulated oven runs profiles/demo-harden-temper.toml at --speed times real time (a few
minutes for the whole cycle) in the live screen, in a temporary data folder unless --data
is given. The quench pause waits for the key `a`; the demo acknowledges it by itself after
--wait seconds, and says so. Quitting ends the demo's simulated run.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import shutil
import signal
import sys
import tempfile
from dataclasses import replace
from importlib import resources
from pathlib import Path

from tuikiln.errors import UserError
from tuikiln.kiln import Kiln, load_kiln
from tuikiln.profile import load_profile
from tuikiln.ui.glyphs import add_glyphs_option, glyphs_from_args

# Inside the package (tuikiln.profiles), so the demo finds it after any install.
DEMO_PROFILE = Path(str(resources.files("tuikiln.profiles") / "demo-harden-temper.toml"))
DEFAULT_SPEED = 200.0


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--speed", type=float, default=DEFAULT_SPEED, metavar="N",
                        help=f"simulated seconds per real second (default {DEFAULT_SPEED:g})")
    parser.add_argument("--profile", metavar="FILE", default=str(DEMO_PROFILE),
                        help="run another profile in the demo (default: the demo profile)")
    parser.add_argument("--wait", type=float, default=20.0, metavar="SECONDS",
                        help="acknowledge the quench pause by itself after this many real "
                        "seconds (default 20; 0: wait for the key)")
    parser.add_argument("--units", type=str.upper, choices=("C", "F"),
                        help="show temperatures in C or F (default: the profile's)")
    parser.add_argument("--no-bell", action="store_true", help="do not ring the bell")
    add_glyphs_option(parser)


def run(args: argparse.Namespace) -> int:
    args.glyph_set = glyphs_from_args(args)  # a bad $TUIKILN_GLYPHS stops here
    if not args.speed > 0:
        raise UserError(f"--speed must be more than 0, not {args.speed:g}")
    profile = load_profile(args.profile)
    kiln = Kiln(name="Demo oven (simulated)", units=profile.units,
                device={"kind": "sim", "speed": args.speed})
    kiln = replace(kiln, text=f'name = "{kiln.name}"\n[device]\nkind = "sim"\n')
    # Sped up, the usual reminder every 5 simulated minutes would come every second or two:
    # remind no more often than the demo waits before it answers a pause by itself.
    kiln = replace(kiln, alarms={"pause_remind": max(300.0, args.wait * args.speed)})
    if args.kiln:
        # The demo always runs on the simulator, but a kiln file's alerts (MQTT, hooks) are
        # used, so a person can try their phone notification on the demo's quench pause.
        yours = load_kiln(args.kiln)
        kiln = replace(kiln, name=yours.name, mqtt=yours.mqtt, hooks=yours.hooks,
                       bell=yours.bell)
    temporary = args.data is None
    data_dir = Path(args.data) if args.data else Path(tempfile.mkdtemp(prefix="tuikiln-demo-"))
    try:
        words, code = asyncio.run(demo(kiln, profile, data_dir, args))
    finally:
        if temporary:
            shutil.rmtree(data_dir, ignore_errors=True)
    if code:  # the screen stopped on an error (Textual printed it); the run was ended above
        print("tuikiln: the demo's screen stopped on an error (shown above); its simulated "
              "run was ended", file=sys.stderr)
        return code
    if words:
        print(words)
    return 0


async def demo(kiln: Kiln, profile, data_dir: Path, args: argparse.Namespace
               ) -> tuple[str, int]:
    """The demo's closing words, and the screen's exit status (non-zero: it crashed)."""
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.inprocess import EngineControl, build_engine, run_engine, wait_for_run_id
    from tuikiln.ui.loglink import LogLink
    from tuikiln.ui.screens.live import LiveScreen

    # Sped up, a reading every simulated second is more than the screen in this process can
    # keep pace with; a reading every two simulated seconds is still finer than it shows.
    tick_s = 2.0 if args.speed > 100 else 1.0
    engine = build_engine(kiln, profile, data_dir, args.speed, alerts=True, tick_s=tick_s)
    for sink in engine.sinks:
        await sink.start()
    task = asyncio.create_task(run_engine(engine))
    try:
        run_id = await wait_for_run_id(engine, task)
        link = LogLink(data_dir, run_id, control=EngineControl(engine))
        wait = args.wait if args.wait > 0 else None
        app = TuikilnApp(
            lambda: LiveScreen(
                link, poll_s=0.5, auto_acknowledge_s=wait,
                title=f"tuikiln demo · simulated oven at {args.speed:g}× speed",
                leave_words="The demo's simulated run has ended. Start your own with "
                "`tuikiln home`, or run the demo again with `tuikiln demo`."),
            units=args.units or profile.units, bell=not args.no_bell, glyphs=args.glyph_set)
        # A closed terminal (SIGHUP) or a kill (SIGTERM) ends the demo's run cleanly, logged.
        loop = asyncio.get_running_loop()
        for signum in (signal.SIGHUP, signal.SIGTERM):
            loop.add_signal_handler(signum, _closer(engine, app, signum))
        words = await app.run_async()
    finally:
        if not task.done():
            engine.request_stop("stopped-by-signal", "the demo was closed")
            try:
                await asyncio.wait_for(task, 5.0)
            except (TimeoutError, asyncio.CancelledError, Exception):
                task.cancel()
        for sink in engine.sinks:
            with contextlib.suppress(Exception):
                await asyncio.wait_for(sink.stop(), 10.0)
    return words or "", app.return_code or 0


def _closer(engine, app, signum: int):  # noqa: ANN001, ANN202 - engine and app
    def close() -> None:
        name = signal.Signals(signum).name
        engine.request_stop("stopped-by-signal", f"the demo was closed ({name})")
        app.exit()

    return close
