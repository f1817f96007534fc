"""`tuikiln sim serve`: the built-in software oven as a real Modbus RTU device.

The work is done in `simulator.serve`; this module only hooks it into the command line.
"""

from __future__ import annotations

import argparse


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from tuikiln.simulator.serve import add_serve_arguments

    sub = parser.add_subparsers(dest="sim_command", metavar="SUBCOMMAND")
    serve = sub.add_parser(
        "serve",
        help="answer Modbus RTU as device 1 on a new pseudo-terminal (or --tcp PORT)",
        description="Answer Modbus RTU as the simulated controller. The first line printed "
        "is the pty path (or tcp://127.0.0.1:PORT) to point a driver or mbpoll at. Registers: "
        "0 chamber, 1 setpoint, 2 output, 3 status, 4 run, 5 load (tenths of °C / %); "
        "see drivers/maps/sim.toml.",
    )
    add_serve_arguments(serve)


def run(args: argparse.Namespace) -> int:
    if getattr(args, "sim_command", None) != "serve":
        print("tuikiln sim: say what to do: `tuikiln sim serve --pty` (see --help)")
        return 2
    from tuikiln.simulator.serve import main

    return main(args, prog="tuikiln sim")
