"""`tuikiln watch`: the live screen of the run going on (started by `tuikiln run` or home).

Leaving the screen (q) leaves the run going; `tuikiln watch` comes back to it.
"""

from __future__ import annotations

import argparse
import sys

from tuikiln.errors import UserError
from tuikiln.ui.glyphs import add_glyphs_option, glyphs_from_args


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--units", type=str.upper, choices=("C", "F"),
                        help="show temperatures in C or F (default: the kiln's)")
    parser.add_argument("--no-bell", action="store_true", help="do not ring the bell")
    add_glyphs_option(parser)


def run(args: argparse.Namespace) -> int:
    args.glyph_set = glyphs_from_args(args)  # a bad $TUIKILN_GLYPHS stops here
    from tuikiln import control
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.launcher import Launcher
    from tuikiln.ui.screens.live import LiveScreen

    launcher = Launcher(args.data, args.kiln)
    active = control.pick_run(launcher.data_dir, launcher.kiln.name if args.kiln else None)
    if active.run is None:
        raise UserError("the run is still starting: try again in a moment")
    link = launcher.link(int(active.run))
    if link.control is None:
        raise UserError("the run's control socket is not there: see `tuikiln status`")
    app = TuikilnApp(lambda: LiveScreen(link), units=args.units or launcher.kiln.units,
                     bell=launcher.kiln.bell and not args.no_bell,
                     glyphs=args.glyph_set)
    words = app.run()
    link.close()
    if app.return_code:  # the screen stopped on an error; Textual has printed it above
        print("tuikiln: the screen stopped on an error (shown above)", file=sys.stderr)
        return app.return_code
    if words:
        print(words)
    return 0
