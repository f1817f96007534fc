"""`tuikiln replay`, `tuikiln report` and `tuikiln import`: hold a logged run against a profile.

    tuikiln replay RUN [--against PROFILE] [--json] [--band 5 --hold-grace 1m ...]
    tuikiln report RUN -o FILE.html|FILE.md|FILE.txt|- [--units C|F] [--against PROFILE]
    tuikiln import CSV --against PROFILE [--time-column time --chamber-column chamber ...]
    tuikiln replay --csv CSV --against PROFILE        (the same as import)

RUN is a run id from `tuikiln runs`, or "last". Threshold options (`--band`, `--overshoot`,
`--hold-grace`, ... every key of a profile's [limits]) run the engine's rules again over the
logged samples with those thresholds: what would have fired, and when. A CSV is read whole
before anything is analysed; nothing is stored in the run log (the engine is its only writer).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import Any

from tuikiln.errors import FileProblems, UserError
from tuikiln.limits import LIMIT_KEYS, LimitKey

# The report's form goes by the file's suffix.
REPORT_FORMS = {".html": "html", ".htm": "html", ".md": "markdown", ".markdown": "markdown",
                ".txt": "text"}


def _option(key: LimitKey) -> str:
    return "--" + key.name.replace("_", "-")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    command = parser.prog.split()[-1]
    if command == "import":
        parser.add_argument("csv", metavar="CSV", help="the log file (CSV with a header row)")
    else:
        parser.add_argument("run", metavar="RUN", nargs="?",
                            help='a run id from `tuikiln runs`, or "last" (default)')
        parser.add_argument("--csv", metavar="FILE", help="replay another tool's CSV log instead")
    parser.add_argument("--against", metavar="PROFILE",
                        help="the profile to hold the log against (default: the run's own)")
    if command == "report":
        parser.add_argument("-o", "--output", metavar="FILE", required=True,
                            help='the report file: .html (with a chart), .md (Markdown) or '
                            '.txt (plain text); "-" prints the plain text')
        parser.add_argument("--units", dest="display_units", type=str.upper,
                            choices=("C", "F"), default=None,
                            help="show temperatures in C or F (default: the run's units, "
                            "which are the kiln file's as it was when the run was made; for "
                            "a CSV log, the profile's)")
    else:
        parser.add_argument("--json", dest="json_output", action="store_true",
                            help="print JSON")
    csv = parser.add_argument_group(
        "CSV logs (what is not given is read from the file; a contradiction is refused)")
    csv.add_argument("--time-column", default=None, metavar="NAME",
                     help='header of the time column (default: the first of "time", "t_s", '
                     '"timestamp", "datetime", "date/time", "elapsed"; a unit such as "(s)" '
                     'after the name is ignored)')
    csv.add_argument("--chamber-column", default=None, metavar="NAME",
                     help='header of the chamber column (default: the first of "chamber", '
                     '"chamber_c", "temperature", "temp", "pv")')
    csv.add_argument("--load-column", metavar="NAME",
                     help='header of a load thermocouple column (default: none, or "load_c" '
                     "in a file from tuikiln export)")
    # In a report, --units is the unit shown; the CSV's own unit is then --csv-units only.
    unit_options = ("--csv-units",) if command == "report" else ("--units", "--csv-units")
    csv.add_argument(*unit_options, dest="csv_units", type=str.upper, choices=("C", "F"),
                     default=None,
                     help='the temperature unit of the file (default: from the header, such '
                     'as "°F", "(F)" or "degF", else C)')
    csv.add_argument("--time-format", default="auto", metavar="FORMAT",
                     help='"seconds", "minutes", "hms" (H:MM:SS), "iso", "epoch" (Unix '
                     'seconds), "days" (spreadsheet day serials) or a strftime format '
                     '(default: read from the first rows; plain numbers are seconds, or '
                     'minutes under a header such as "time (min)")')
    csv.add_argument("--delimiter", default=None, metavar="CHAR",
                     help='column separator (default: the one of , ; tab | that splits the '
                     "header and first rows alike)")
    csv.add_argument("--decimal", default=None, choices=(".", ","),
                     help='decimal mark (default: "," when the separator is not a comma and '
                     'the numbers are written like "21,5", else ".")')
    csv.add_argument("--encoding", default=None, metavar="NAME",
                     help="text encoding (default: UTF-8, with or without a byte-order mark, "
                     "else Latin-1)")
    analysis = parser.add_argument_group("analysis")
    analysis.add_argument("--c", type=float, default=None, metavar="C",
                          help="Hollomon-Jaffe constant; it depends on the steel (default 20)")
    analysis.add_argument("--quench-below", metavar="TEMP", default=None,
                          help='quench timing: time from the hold to below this (default '
                               '"65C", hand-warm)')
    what = parser.add_argument_group(
        "what if (thresholds in the profile's units; the rules are run again with them)")
    for key in LIMIT_KEYS:
        what.add_argument(_option(key), dest=f"limit_{key.name}", metavar="VALUE",
                          default=None, help=key.help)


def run(args: argparse.Namespace) -> int:
    from tuikiln.analysis import report as report_mod

    loaded = _load(args)
    overrides = _limit_overrides(args, loaded.profile.units)
    c, below_c = _analysis_options(args)
    shown = getattr(args, "display_units", None)  # None: the run's (or the profile's) units
    whatif: dict[str, Any] | None = None
    if overrides:
        from tuikiln.analysis.whatif import compare_alarms

        baseline = loaded.replay(rerun=True, c=c, quench_below_c=below_c, units=shown)
        result = loaded.replay(loaded.limits.merged(overrides), rerun=True, c=c,
                               quench_below_c=below_c, units=shown)
        changes = compare_alarms(baseline.events, result.events, result.units)
        whatif = report_mod.whatif_dict(baseline, result, changes, overrides)
    else:
        result = loaded.replay(c=c, quench_below_c=below_c, units=shown)
    if args.command == "report":
        if args.output == "-":
            sys.stdout.write(report_mod.render_text(result, whatif))
            return 0
        path = Path(args.output)
        form = REPORT_FORMS.get(path.suffix.lower())
        if form is None:
            raise UserError(f"{path}: the report is HTML, Markdown or text: name the file "
                            ".html, .md or .txt (or -o - to print it)")
        text = {"html": report_mod.render_html, "markdown": report_mod.render_markdown,
                "text": report_mod.render_text}[form](result, whatif)
        try:
            path.write_text(text, encoding="utf-8")
        except OSError as exc:
            raise UserError(f"{path}: cannot write the report: {exc.strerror or exc}") from None
        print(f"Report written to {path} ({result.verdict})")
        return 0
    if getattr(args, "json_output", False):
        out = result.as_dict()
        if whatif is not None:
            out["whatif"] = whatif
        print(json.dumps(out, indent=2, ensure_ascii=False))
    else:
        sys.stdout.write(report_mod.render_text(result, whatif))
    return 0


# ----- options -----


def _limit_overrides(args: argparse.Namespace, units: str) -> dict[str, float]:
    from tuikiln.limits import parse_limits

    table: dict[str, Any] = {}
    for key in LIMIT_KEYS:
        raw = getattr(args, f"limit_{key.name}", None)
        if raw is None:
            continue
        if key.kind == "duration":
            table[key.name] = raw
        else:
            try:
                table[key.name] = float(raw)
            except ValueError:
                raise UserError(f'{_option(key)} {raw}: needs a number, such as 10') from None
    problems: list[str] = []

    def report(path: tuple, message: str) -> None:
        name = str(path[-1]) if path else ""
        problems.append(f"--{name.replace('_', '-')}: {message}")

    values = parse_limits(table, units, report, ("options",))
    if problems:
        raise UserError("\n".join(problems))
    return values


def _analysis_options(args: argparse.Namespace) -> tuple[float, float]:
    from tuikiln.analysis.replay import DEFAULT_QUENCH_BELOW_C
    from tuikiln.analysis.temper import DEFAULT_C
    from tuikiln.units import parse_temperature

    c = DEFAULT_C if args.c is None else float(args.c)
    if not math.isfinite(c) or c <= 0:
        raise UserError(f"--c {args.c:g}: C must be a number above zero (about 10 to 20)")
    below = DEFAULT_QUENCH_BELOW_C
    if args.quench_below is not None:
        try:
            below = parse_temperature(args.quench_below, None)
        except ValueError as exc:
            raise UserError(f'--quench-below: {exc} (write it with its unit, such as "150F")'
                            ) from None
    return c, below


# ----- loading -----


def _load(args: argparse.Namespace) -> Any:
    csv_path = args.csv if args.command == "import" else getattr(args, "csv", None)
    if csv_path is not None:
        if getattr(args, "run", None):
            raise UserError("give either a RUN or --csv FILE, not both")
        return _load_csv(args, csv_path)
    return _load_run(args)


def _against(args: argparse.Namespace) -> Any:
    from tuikiln.profile import load_profile

    return load_profile(args.against)


def _load_csv(args: argparse.Namespace, path: str) -> Any:
    from tuikiln.analysis.csvlog import CsvLayout
    from tuikiln.analysis.loading import from_csv
    from tuikiln.kiln import load_kiln

    if not args.against:
        raise UserError("a CSV log needs --against PROFILE: the profile to hold it against")
    delimiter = "\t" if args.delimiter in ("tab", "\\t") else args.delimiter
    try:
        layout = CsvLayout(time_column=args.time_column, chamber_column=args.chamber_column,
                           load_column=args.load_column, units=args.csv_units,
                           time_format=args.time_format, delimiter=delimiter,
                           decimal=args.decimal, encoding=args.encoding)
    except ValueError as exc:
        raise UserError(str(exc)) from None
    profile = _against(args)
    kiln = load_kiln(args.kiln) if args.kiln else None
    return from_csv(path, layout, profile, kiln)


def open_run_log(data: str | None, other: str = "") -> Any:
    """The data folder's run log for reading; a UserError when there is none yet."""
    from tuikiln.runlog import RUNLOG_NAME, RunLog, default_data_dir

    folder = default_data_dir(data)
    path = folder / RUNLOG_NAME
    if not path.exists():
        raise UserError(f"no run log in {folder}: no run has been recorded there yet "
                        f"(or give --data DIR{other})")
    return RunLog.reader(path)


def _load_run(args: argparse.Namespace) -> Any:
    from tuikiln.analysis.loading import from_log
    from tuikiln.profile import parse_profile

    log = open_run_log(args.data)
    try:
        info = _find_run(log, args.run)
        against = _against(args) if args.against else None
        if not info.profile_text:
            if against is None:
                raise UserError(f"run {info.id} has no stored profile: give --against PROFILE")
            profile = against
        else:
            try:
                profile = parse_profile(info.profile_text, f"run {info.id}'s profile "
                                        f"({info.profile_path or info.profile})")
            except FileProblems as exc:
                if against is None:
                    raise UserError(f"run {info.id}'s stored profile no longer checks:\n{exc}"
                                    ) from None
                profile = against
        samples = log.samples(info.id)
        events = log.events(info.id)
    finally:
        log.close()
    if samples["t"].size < 2:
        raise UserError(f"run {info.id} has fewer than two samples: nothing to replay")
    run_dict = info.summary()
    run_dict["load"] = dict(info.load) if info.load else None
    return from_log(samples, events, started=info.started, profile=profile,
                    outcome=info.status, units=info.units, kiln_text=info.kiln_text,
                    against=against, run=run_dict)


def _find_run(log: Any, which: str | None) -> Any:
    if which in (None, "", "last", "latest"):
        info = log.latest_run()
        if info is None:
            raise UserError("the run log has no runs yet")
        return info
    try:
        run_id = int(str(which))
    except ValueError:
        raise UserError(f'RUN must be a run id from `tuikiln runs` or "last", not "{which}"'
                        ) from None
    info = log.run(run_id)
    if info is None:
        known = [r.id for r in log.runs()]
        hint = f" (runs: {known[0]}..{known[-1]})" if known else " (the log has no runs yet)"
        raise UserError(f"there is no run {run_id}{hint}")
    return info
