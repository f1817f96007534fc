"""`tuikiln home`: the kiln and its device, the profiles, the recent runs; start, watch,
or look back at a run from one screen."""

from __future__ import annotations

import argparse
import sys

from tuikiln.ui.glyphs import add_glyphs_option, glyphs_from_args


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--units", type=str.upper, choices=("C", "F"),
                        help="show temperatures in C or F (default: the kiln's)")
    add_glyphs_option(parser)


def run(args: argparse.Namespace) -> int:
    args.glyph_set = glyphs_from_args(args)  # a bad $TUIKILN_GLYPHS stops here
    from tuikiln.ui.app import TuikilnApp
    from tuikiln.ui.launcher import Launcher
    from tuikiln.ui.screens.home import HomeScreen

    launcher = Launcher(args.data, args.kiln)
    app = TuikilnApp(lambda: HomeScreen(launcher), units=args.units or launcher.kiln.units,
                     bell=launcher.kiln.bell, glyphs=args.glyph_set)
    words = app.run()
    if app.return_code:  # the screen stopped on an error; Textual has printed it above
        print("tuikiln: the screen stopped on an error (shown above)", file=sys.stderr)
        return app.return_code
    if words:
        print(words)
    return 0
