"""`tuikiln review [RUN]`: a past run in the replay screen (chart with the plan, a cursor,
the step verdicts, notes and alarms). RUN is a run id, or "last" (the default)."""

from __future__ import annotations

import argparse
import sys
from typing import TYPE_CHECKING

from tuikiln.errors import UserError
from tuikiln.ui.glyphs import add_glyphs_option, glyphs_from_args

if TYPE_CHECKING:
    from tuikiln.runlog import RunInfo



def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run_id", metavar="RUN", nargs="?", default="last",
                        help='a run id from `tuikiln runs`, or "last" (default)')
    parser.add_argument("--units", type=str.upper, choices=("C", "F"),
                        help="show temperatures in C or F (default: the run's)")
    add_glyphs_option(parser)


def run(args: argparse.Namespace) -> int:
    args.glyph_set = glyphs_from_args(args)  # a bad $TUIKILN_GLYPHS stops here
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.launcher import Launcher
    from tuikiln.ui.screens.replay import ReplayScreen

    launcher = Launcher(args.data, args.kiln)
    runs = launcher.runs(100000)
    if not runs:
        raise UserError(f"there are no runs in {launcher.data_dir} yet")
    chosen: RunInfo | None
    if args.run_id == "last":
        chosen = runs[0]
    else:
        try:
            wanted = int(args.run_id)
        except ValueError:
            raise UserError(f'RUN must be a run id or "last", not "{args.run_id}"') from None
        chosen = next((r for r in runs if r.id == wanted), None)
        if chosen is None:
            raise UserError(f"there is no run {wanted} in {launcher.data_dir}: see `tuikiln runs`")
    link = launcher.link(chosen.id, live=False)
    app = TuikilnApp(lambda: ReplayScreen(link), units=args.units or chosen.units or "C",
                     glyphs=args.glyph_set)
    app.run()
    link.close()
    if app.return_code:  # the screen stopped on an error; Textual has printed it above
        print("tuikiln: the screen stopped on an error (shown above)", file=sys.stderr)
        return app.return_code
    return 0
