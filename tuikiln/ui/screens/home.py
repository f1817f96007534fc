"""Home: the kiln and its device, the profiles, the recent runs; start, watch or replay."""

from __future__ import annotations

import asyncio
import contextlib
import time
from pathlib import Path
from typing import TYPE_CHECKING

from rich.text import Text
from textual import events, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.css.query import NoMatches
from textual.screen import Screen
from textual.widgets import DataTable, Static

from tuikiln.control import ActiveRun
from tuikiln.engine.states import Outcome, RunState
from tuikiln.errors import UserError
from tuikiln.ovenmodel_plan import predict_on_kiln
from tuikiln.ovenmodel_store import quiet_saved_model
from tuikiln.plan import plan_profile
from tuikiln.profile import load_profile
from tuikiln.runlog import RunInfo
from tuikiln.ui.launcher import Launcher, find_profiles
from tuikiln.ui.screens.help import SAFETY, HelpScreen
from tuikiln.ui.screens.live import LiveScreen
from tuikiln.ui.screens.preview import PreviewScreen
from tuikiln.ui.screens.replay import ReplayScreen
from tuikiln.ui.widgets.key_footer import KeyFooter
from tuikiln.units import format_duration, format_temp

if TYPE_CHECKING:
    from textual import getters

    from tuikiln.ui.app import TuikilnApp

ABOUT = ("Home. Pick a profile and press Enter to see its plan (s there starts it), or pick a "
         "past run and press Enter to replay it. Tab moves between the lists.")
GOING_REFRESH_S = 3.0
OUTCOME_MARK: dict[str, str] = {Outcome.COMPLETED: "✔", RunState.RUNNING: "●", Outcome.ABORTED: "✖",
                Outcome.STOPPED_BY_ALARM: "✖", Outcome.UNFINISHED: "?",
                Outcome.ENGINE_FAILED: "✖", Outcome.STOPPED_BY_SIGNAL: "■",
                Outcome.ENDED_AFTER_RESTART: "■"}


def device_words(launcher: Launcher) -> str:
    kiln = launcher.kiln
    device = dict(kiln.device)
    kind = str(device.get("kind", "sim"))
    if kind == "sim":
        speed = device.get("speed", 1)
        where = f"built-in simulator (speed ×{speed})"
    else:
        where = f"{kind} on {device.get('port', '?')}"
        if "baud" in device:
            where += f" at {device['baud']} baud"
    return where


class HomeScreen(Screen[None]):
    if TYPE_CHECKING:  # the app every screen runs in, for the checker (no runtime check)
        app = getters.app(TuikilnApp)

    BINDINGS = [
        # Priority: the lists would take Enter for themselves and the footer hide it.
        Binding("enter", "open", "Open", priority=True),
        Binding("w", "watch", "Watch the going run"),
        Binding("tab", "app.focus_next", "Next list", show=False),
        Binding("g", "refresh", "Refresh"),
        Binding("u", "switch_units", "°C/°F"),
        Binding("question_mark,f1", "help", "Help"),
        Binding("q", "quit", "Quit"),
    ]

    def __init__(self, launcher: Launcher) -> None:
        super().__init__()
        self.launcher = launcher
        self.profile_paths: list[Path] = []
        self.run_list: list[RunInfo] = []

    def compose(self) -> ComposeResult:
        yield Static("tuikiln · home", id="home-title")
        yield Static("", id="home-kiln")
        with Horizontal(id="home-main"):
            with Vertical(id="home-left"):
                yield DataTable(id="home-profiles", cursor_type="row", zebra_stripes=True)
            yield DataTable(id="home-runs", cursor_type="row", zebra_stripes=True)
        yield Static(SAFETY, id="home-help")
        yield KeyFooter()

    def on_resize(self, event: events.Resize) -> None:
        # Below 120 columns the two tables cut their columns off: stack them (app.tcss).
        self.set_class(event.size.width < 120, "-narrow")

    def on_mount(self) -> None:
        profiles = self.query_one("#home-profiles", DataTable)
        profiles.border_title = "Profiles (Enter: plan and start)"
        runs = self.query_one("#home-runs", DataTable)
        runs.border_title = "Recent runs (Enter: replay or watch)"
        self.watch(self.app, "units", self.units_changed, init=False)
        self.action_refresh()
        # A run started or ended elsewhere (another terminal) shows in the kiln line.
        self.set_interval(GOING_REFRESH_S, self.refresh_going)
        profiles.focus()

    def on_screen_resume(self) -> None:
        """Back from the live, preview or replay screen: what it did shows at once."""
        self.action_refresh()

    def show_kiln(self, going: ActiveRun | None) -> None:
        kiln = self.launcher.kiln
        text = Text()
        text.append(f"{kiln.name}", style="bold")
        text.append(f" · {self.app.glyphs.plain(device_words(self.launcher))} · max "
                    f"{format_temp(kiln.max_c, self.app.units)} · bell "
                    f"{'on' if self.app.bell_on else 'off'}\n")
        if going is not None:
            text.append(f"● run {going.run} is going: {going.profile} — press w to watch it",
                        style="bold")
        else:
            text.append("No run is going. Data folder: " + str(self.launcher.data_dir))
        self.query_one("#home-kiln", Static).update(text)

    @work(exclusive=True, group="home-going")
    async def refresh_going(self) -> None:
        going = await asyncio.to_thread(self.launcher.going_run)
        with contextlib.suppress(NoMatches):  # the screen is being taken down meanwhile
            self.show_kiln(going)

    def units_changed(self, _units: str) -> None:
        self.action_refresh()

    @work(exclusive=True, group="home-refresh")
    async def action_refresh(self) -> None:
        launcher = self.launcher
        paths = await asyncio.to_thread(find_profiles)
        rows = await asyncio.to_thread(self.profile_rows, paths)
        runs = await asyncio.to_thread(launcher.runs)
        going = await asyncio.to_thread(launcher.going_run)
        # The files were read off the loop; the screen may have been left (or the app quit)
        # meanwhile: then there is nothing to show them in.
        with contextlib.suppress(NoMatches):
            self.show_lists(paths, rows, runs)
            self.show_kiln(going)

    def show_lists(self, paths: list[Path], rows: list[tuple[str, str, str, str]],
                   runs: list[RunInfo]) -> None:
        self.profile_paths = paths
        self.run_list = runs
        table = self.query_one("#home-profiles", DataTable)
        table.clear(columns=True)
        table.add_columns("profile", "peak", "total", "file")
        for row in rows:
            table.add_row(*row)
        runs_table = self.query_one("#home-runs", DataTable)
        runs_table.clear(columns=True)
        runs_table.add_columns("run", "profile", "started", "length", "outcome")
        for run in runs:
            status = run.status
            length = format_duration((run.ended or time.time()) - run.started) if (
                run.ended or status == RunState.RUNNING) else "--"
            started = time.strftime("%d %b %H:%M", time.localtime(run.wall_started or
                                                                   run.started))
            runs_table.add_row(str(run.id), run.profile[:28], started, length,
                               self.app.glyphs.plain(f"{OUTCOME_MARK.get(status, '·')} {status}"))

    def profile_rows(self, paths: list[Path]) -> list[tuple[str, str, str, str]]:
        rows = []
        units = self.app.units
        kiln = self.launcher.kiln
        # With a learned oven the total is what this oven takes ("~"), as `plan` predicts.
        model = quiet_saved_model(self.launcher.data_dir, kiln.name)
        for path in paths:
            try:
                plan = plan_profile(load_profile(path, max_c=kiln.max_c))
            except UserError:
                rows.append((f"✖ {path.stem} (has mistakes)", "", "", path.name))
                continue
            total = format_duration(plan.total_s) + ("+" if plan.open_ended else "")
            if model is not None:
                predicted = predict_on_kiln(plan, model, kiln.alarms).total_s
                total = "never" if predicted is None else "~" + format_duration(predicted)
            rows.append((plan.profile.name[:40], format_temp(plan.peak_c, units), total,
                         path.name))
        return rows

    def action_open(self) -> None:
        focused = self.focused
        if isinstance(focused, DataTable) and focused.id == "home-runs":
            if not self.run_list:
                return
            run = self.run_list[focused.cursor_row]
            if run.status == RunState.RUNNING:
                self.open_live(run.id)
            else:
                self.app.push_screen(ReplayScreen(self.launcher.link(run.id, live=False)))
            return
        table = self.query_one("#home-profiles", DataTable)
        if not self.profile_paths:
            self.notify("No profiles found: put .toml files in the profiles folder.")
            return
        path = self.profile_paths[table.cursor_row]
        kiln = self.launcher.kiln
        self.app.push_screen(PreviewScreen(
            path, max_c=kiln.max_c, start=self.start_run, alarms=kiln.alarms,
            model=quiet_saved_model(self.launcher.data_dir, kiln.name)))

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        self.action_open()

    def start_run(self, path: str) -> None:
        self.start_worker(path)

    @work(exclusive=True, group="home-start")
    async def start_worker(self, path: str) -> None:
        if self.launcher.going_run() is not None:
            self.notify("A run is already going: watch it (w) or end it first.",
                        severity="error")
            return
        self.notify(f"Starting {Path(path).name} …")
        try:
            run_id = await asyncio.to_thread(self.launcher.start, path)
        except UserError as exc:
            self.notify(str(exc), severity="error", timeout=10)
            return
        if isinstance(self.app.screen, PreviewScreen):
            self.app.pop_screen()
        self.open_live(run_id)
        self.action_refresh()

    def open_live(self, run_id: int) -> None:
        link = self.launcher.link(run_id)
        self.app.push_screen(LiveScreen(
            link, leave_words=f"Run {run_id} goes on. Come back with: tuikiln watch"))

    def action_watch(self) -> None:
        going = self.launcher.going_run()
        if going is None or going.run is None:
            self.notify("No run is going.")
            return
        self.open_live(int(going.run))

    def action_switch_units(self) -> None:
        self.app.units = "F" if self.app.units == "C" else "C"

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self, ABOUT))

    def action_quit(self) -> None:
        going = self.launcher.going_run()
        self.app.exit(f"Run {going.run} goes on. Come back with: tuikiln watch" if going else "")
