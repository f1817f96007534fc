"""A past run against its plan: a cursor through time with the readings under it, the
per-step verdicts of the replay analysis (where it exists), and the run's notes and alarms."""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.css.query import NoMatches
from textual.screen import Screen
from textual.widgets import Static

from tuikiln.analysis.replay import MET, MISSED, NOT_YET, REMARKS, UNDER_WAY
from tuikiln.engine.states import RunState
from tuikiln.events import EventKind
from tuikiln.profile import describe_step
from tuikiln.ui.chartdata import replay_chart
from tuikiln.ui.runfeed import RunHeader, RunLink, SampleBuffer
from tuikiln.ui.screens.help import HelpScreen
from tuikiln.ui.widgets.chart import TemperatureChart
from tuikiln.ui.widgets.event_log import EventLog
from tuikiln.ui.widgets.key_footer import KeyFooter
from tuikiln.units import format_duration, format_temp

if TYPE_CHECKING:
    from textual import getters

    from tuikiln.ui.app import TuikilnApp

ABOUT = ("Replay of a past run. The dashed line is the plan, each step drawn from the "
         "moment it really began. Move the cursor with ← → (Shift: ten times further), "
         "Home/End; the readings under it show on the right.")
VERDICT_MARK = {MET: "✔", REMARKS: "▲", MISSED: "✖", UNDER_WAY: "…", NOT_YET: "·"}
KEPT_KINDS = (EventKind.NOTE, EventKind.ALARM_RAISED, EventKind.ALARM_ACKNOWLEDGED,
              EventKind.ALARM_CLEARED, EventKind.STEP_START, EventKind.OPERATOR_NEEDED,
              EventKind.OPERATOR_ACKNOWLEDGED, EventKind.RUN_END, EventKind.SAFE_STATE,
              EventKind.GAP, EventKind.DEVICE)


def step_starts(events: Sequence[Mapping[str, Any]]) -> dict[int, float]:
    starts: dict[int, float] = {}
    for event in events:
        if event.get("kind") == EventKind.STEP_START:
            index = (event.get("detail") or {}).get("index")
            if isinstance(index, int):
                starts.setdefault(index, float(event["time"]))
    return starts


def verdict_lines(header: RunHeader, samples: SampleBuffer,
                  events: Sequence[Mapping[str, Any]], units: str | None = None) -> list[str]:
    """Per-step verdicts of the replay analysis (tuikiln.analysis.replay), in words, with
    temperatures in `units` (the profile's by default). The analysis writes them from its
    numbers in those units: its sentences are never rewritten afterwards, where a band
    ("± 8 °C") would be taken for a temperature."""
    from tuikiln.analysis.loading import from_log

    columns = {name: samples.column(name) for name in
               ("t", "chamber_c", "load_c", "core_c", "setpoint_c", "output_pct", "step",
                "state")}
    if not columns["t"].size:
        return ["(no samples: nothing to judge)"]
    try:
        # The same loader as `tuikiln replay`: the kiln's [alarms] count here too.
        shown = "F" if units == "F" else "C" if units == "C" else header.profile.units
        # A header with no outcome is a run still going (tuikiln.ui.loglink): judged so far.
        outcome = header.outcome if header.outcome is not None else RunState.RUNNING
        loaded = from_log(columns, events, started=header.started, profile=header.profile,
                          outcome=outcome, units=shown,
                          kiln_text=str(header.extra.get("kiln_text") or ""))
        result = loaded.replay()
    except Exception as exc:  # the analysis is another module's: show its failure in words
        return [f"(the replay analysis could not judge this run: {exc})"]
    lines = [f"run: {result.verdict}"] + [f"  {reason}" for reason in result.reasons[:1]]
    for step in result.steps:
        lines.append(f"{VERDICT_MARK.get(step.verdict, '·')} {step.verdict}: "
                     f"{step.title(shown)}")
        lines += [f"    {reason}" for reason in step.reasons[:2]]
    return lines


class ReplayScreen(Screen[None]):
    if TYPE_CHECKING:  # the app every screen runs in, for the checker (no runtime check)
        app = getters.app(TuikilnApp)

    BINDINGS = [
        # Priority: the event log below would take these keys for scrolling.
        Binding("left", "move(-1)", "earlier", priority=True),
        Binding("right", "move(1)", "later", priority=True),
        Binding("shift+left", "move(-10)", "← ×10", show=False, priority=True),
        Binding("shift+right", "move(10)", "×10 →", show=False, priority=True),
        Binding("home", "jump(0)", "Start", show=False, priority=True),
        Binding("end", "jump(1)", "End", show=False, priority=True),
        Binding("z", "zoom", "Zoom"),
        Binding("u", "switch_units", "°C/°F"),
        Binding("question_mark,f1", "help", "Help"),
        Binding("escape,q", "back", "Back"),
    ]

    def __init__(self, link: RunLink) -> None:
        super().__init__()
        self.link = link
        self.header: RunHeader | None = None
        self.samples = SampleBuffer()
        self.events: list[Mapping[str, Any]] = []
        self.cursor: float | None = None
        self.zoomed = False
        self.verdicts: dict[str, list[str]] = {}
        """Verdict lines by display units, each written by the analysis in those units."""

    def compose(self) -> ComposeResult:
        yield Static("loading the run …", id="replay-title")
        with Horizontal(id="replay-main"):
            yield TemperatureChart(id="replay-chart")
            with VerticalScroll(id="replay-side", can_focus=False):
                yield Static("", id="replay-cursor")
                yield Static("", id="replay-verdicts")
        yield EventLog(id="replay-events")
        yield KeyFooter()

    def on_mount(self) -> None:
        self.watch(self.app, "units", self.units_changed, init=False)
        self.load()

    @work(exclusive=True, group="replay-load")
    async def load(self) -> None:
        try:
            await self.load_run()
        except NoMatches:  # left before the run was read
            return

    async def load_run(self) -> None:
        self.header = await asyncio.to_thread(self.link.info)
        self.samples.append(await asyncio.to_thread(self.link.read_samples, None))
        self.events = list(await asyncio.to_thread(self.link.read_events, 0))
        log = self.query_one(EventLog)
        log.started = self.header.started
        log.units = self.app.units
        log.add_events([e for e in self.events if e.get("kind") in KEPT_KINDS])
        units = self.app.units
        self.verdicts[units] = await asyncio.to_thread(verdict_lines, self.header,
                                                       self.samples, self.events, units)
        self.cursor = self.header.started
        self.show()

    @property
    def ended(self) -> float:
        assert self.header is not None
        last = self.samples.last_t
        return self.header.ended or (last if last is not None else self.header.started)

    def window(self) -> tuple[float, float]:
        assert self.header is not None
        if self.zoomed and self.cursor is not None:
            return self.cursor - 1800.0, self.cursor + 1800.0
        return self.header.started, max(self.ended, self.header.started + 60.0)

    def show(self) -> None:
        if self.header is None:
            return
        header, units = self.header, self.app.units
        self.query_one(TemperatureChart).spec = replay_chart(
            header.plan, self.samples, header.started, self.ended, units,
            step_starts(self.events), self.cursor, self.window())
        outcome = header.outcome or "still going (as far as it has got)"
        self.query_one("#replay-title", Static).update(
            f"Replay · run {header.run_id}: {header.profile.name} · "
            f"{format_duration(self.ended - header.started)} · {outcome}")
        self.query_one("#replay-cursor", Static).update(self.cursor_text())
        lines = self.verdicts.get(units)
        if lines is None:
            lines = ["(writing the verdicts in °" + units + " …)"]
            self.verdicts_in(units)
        self.query_one("#replay-verdicts", Static).update(
            Text("Verdicts\n", style="bold") + Text(self.app.glyphs.plain("\n".join(lines))))

    @work(exclusive=True, group="replay-verdicts")
    async def verdicts_in(self, units: str) -> None:
        if self.header is None:
            return
        lines = await asyncio.to_thread(verdict_lines, self.header, self.samples, self.events,
                                        units)
        self.verdicts[units] = lines
        with contextlib.suppress(NoMatches):  # left the screen meanwhile
            self.show()

    def cursor_text(self) -> Text:
        assert self.header is not None
        text = Text()
        t = self.samples.column("t")
        if self.cursor is None or not t.size:
            return Text("no samples in this run")
        index = int(np.clip(np.searchsorted(t, self.cursor), 0, t.size - 1))
        units = self.app.units
        text.append(f"at +{format_duration(t[index] - self.header.started)}\n", style="bold")
        for label, name in (("chamber", "chamber_c"), ("load", "load_c"),
                            ("core", "core_c"), ("setpoint", "setpoint_c")):
            value = float(self.samples.column(name)[index])
            if np.isfinite(value):
                text.append(f"{label:<9}{format_temp(value, units, 1)}\n")
        output = float(self.samples.column("output_pct")[index])
        if np.isfinite(output):
            text.append(f"heater   {output:.0f} %\n")
        step = int(self.samples.column("step")[index])
        if 0 <= step < len(self.header.plan.steps):
            words = describe_step(self.header.plan.steps[step].step, units)
            text.append(f"step {step + 1}: {words}")
        return text

    def action_move(self, cells: int) -> None:
        if self.header is None or self.cursor is None:
            return
        start, end = self.window()
        width = max(10, self.query_one(TemperatureChart).size.width - 6)
        self.cursor = float(np.clip(self.cursor + cells * (end - start) / width,
                                    self.header.started, self.ended))
        self.show()

    def action_jump(self, where: int) -> None:
        if self.header is None:
            return
        self.cursor = self.header.started if where == 0 else self.ended
        self.show()

    def action_zoom(self) -> None:
        self.zoomed = not self.zoomed
        self.show()

    def units_changed(self, units: str) -> None:
        self.query_one(EventLog).units = units
        self.show()

    def action_switch_units(self) -> None:
        self.app.units = "F" if self.app.units == "C" else "C"

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self, ABOUT))

    def action_back(self) -> None:
        self.app.pop_screen() if len(self.app.screen_stack) > 2 else self.app.exit("")
