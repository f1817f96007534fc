"""A profile before it runs: the planned curve, the step table, the total time, the clock
time it would end if started now, open-ended steps marked; or its mistakes, with lines."""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import Screen
from textual.widgets import DataTable, Static

from tuikiln.errors import FileProblems, UserError
from tuikiln.ovenmodel import OvenModel
from tuikiln.ovenmodel_plan import Prediction, predict_on_kiln
from tuikiln.plan import Plan, load_words, plan_profile
from tuikiln.profile import describe_step, load_profile
from tuikiln.ui.chartdata import preview_chart
from tuikiln.ui.screens.confirm import ConfirmScreen
from tuikiln.ui.screens.help import SAFETY, HelpScreen
from tuikiln.ui.widgets.chart import TemperatureChart
from tuikiln.ui.widgets.key_footer import KeyFooter
from tuikiln.units import format_duration, format_temp

if TYPE_CHECKING:
    from textual import getters

    from tuikiln.ui.app import TuikilnApp

ABOUT = ("A profile before it runs. Steps marked … are open-ended: their length is known "
         "only at run time (a 'max' ramp, waiting for the load to even out, a free cool, a "
         "pause for you), so the total and the end time are the earliest they can be.")
OPEN_MARK = "…"
WARN_MARK = "▲"


def summary_text(plan: Plan, units: str, now: float, open_mark: str = OPEN_MARK,
                 prediction: Prediction | None = None, warn_mark: str = WARN_MARK) -> Text:
    """Total, end clock time if started now, peak, and what 'open-ended' means here; with a
    learned oven (`prediction`), what this oven takes and what it cannot do."""
    text = Text()
    total = format_duration(plan.total_s)
    end = time.strftime("%a %H:%M", time.localtime(now + plan.total_s))
    at_least = "at least " if plan.open_ended else ""
    text.append(f"total {at_least}{total} · ends {at_least.strip() or 'at'} {end} if started "
                f"now · peak {format_temp(plan.peak_c, units)}", style="bold")
    if prediction is not None:
        oven = prediction.total_s
        if oven is None:
            text.append("\non this oven (learned): never ends: see below", style="bold")
        else:
            ends = time.strftime("%a %H:%M", time.localtime(now + oven))
            text.append(f"\non this oven (learned): about {format_duration(oven)} · ends "
                        f"about {ends}", style="bold")
    if plan.open_ended:
        count = sum(1 for s in plan.steps if s.open_ended)
        counted = ("the learned oven's estimate beside them" if prediction is not None
                   else "counted at their shortest")
        text.append(f"\n{open_mark} {count} open-ended step(s): {counted}.")
    for warning in prediction.warnings if prediction is not None else ():
        text.append(f"\n{warn_mark} step {warning.step + 1}: {warning.text}")
    load = load_words(plan.profile.load)
    if load:
        text.append(f"\nload: {load}")
    return text


class PreviewScreen(Screen[None]):
    """Opened from home on a profile; s starts it (after a summary and a yes)."""

    if TYPE_CHECKING:  # the app every screen runs in, for the checker (no runtime check)
        app = getters.app(TuikilnApp)

    BINDINGS = [
        Binding("s", "start", "Start this run"),
        Binding("u", "switch_units", "°C/°F"),
        Binding("question_mark,f1", "help", "Help"),
        Binding("escape,q", "back", "Back"),
    ]

    def __init__(self, path: str | Path, *, max_c: float | None = None,
                 start: Callable[[str], None] | None = None, model: OvenModel | None = None,
                 alarms: Mapping[str, float] | None = None) -> None:
        """`model`: the kiln's learned oven (its times go beside the plan's), with the kiln
        file's `alarms` (the band the prediction waits for)."""
        super().__init__()
        self.path = str(path)
        self.max_c = max_c
        self.start = start
        self.plan: Plan | None = None
        self.model, self.alarms = model, alarms
        self._predictions: dict[str, Prediction | None] = {}
        self.problems: list[str] = []
        try:
            self.plan = plan_profile(load_profile(self.path, max_c=max_c))
        except FileProblems as exc:
            self.problems = [str(p) for p in exc.problems]
        except UserError as exc:
            self.problems = [str(exc)]

    def prediction(self, units: str) -> Prediction | None:
        """The plan on the learned oven (its warnings in `units`), None without a model."""
        if self.plan is None or self.model is None:
            return None
        if units not in self._predictions:
            try:
                found: Prediction | None = predict_on_kiln(self.plan, self.model, self.alarms,
                                                           "F" if units == "F" else "C")
            except (ValueError, ArithmeticError):
                found = None  # a model that cannot say: the plan alone, as before
            self._predictions[units] = found
        return self._predictions[units]

    def compose(self) -> ComposeResult:
        yield Static("", id="preview-title")
        with Vertical(id="preview-main"):
            if self.plan is None:
                yield Static("", id="preview-problems")
            else:
                yield TemperatureChart(id="preview-chart")
                yield Static("", id="preview-summary")
                yield DataTable(id="preview-steps", cursor_type="row", zebra_stripes=True)
        yield KeyFooter()

    def on_mount(self) -> None:
        self.watch(self.app, "units", self.show, init=True)

    def show(self, _units: str | None = None) -> None:
        units = self.app.units
        title = self.query_one("#preview-title", Static)
        if self.plan is None:
            title.update(f"Profile {Path(self.path).name}: it has mistakes")
            text = Text(f"{len(self.problems)} mistake(s) to fix before it can run:\n\n")
            for line in self.problems:
                text.append(f"✖ {line}\n")
            self.query_one("#preview-problems", Static).update(text)
            return
        plan = self.plan
        title.update(f"Profile: {plan.profile.name}  ({self.path})")
        self.query_one(TemperatureChart).spec = preview_chart(plan, units)
        self.query_one("#preview-summary", Static).update(self.summary(units))
        table = self.query_one(DataTable)
        table.clear(columns=True)
        predicted = self.prediction(units)
        # The figures first, the step's words last: on a narrow terminal the words run off
        # the right edge, not the times.
        table.add_columns("#", "starts", "length",
                          *(["this oven"] if predicted is not None else []), "from", "to",
                          "step")
        for step in plan.steps:
            mark = f" {self.app.glyphs.plain(OPEN_MARK)}" if step.open_ended else ""
            length = ("until you acknowledge" if step.kind == "pause" else
                      f"{format_duration(step.duration_s)}{mark}")
            oven = []
            if predicted is not None:
                p = predicted.steps[step.index]
                oven = ["by you" if step.kind == "pause" else "never"
                        if p.start_s is None or p.end_s is None
                        else format_duration(p.end_s - p.start_s)]
            table.add_row(str(step.index + 1), f"+{format_duration(step.start_s)}", length,
                          *oven, format_temp(step.from_c, units), format_temp(step.to_c, units),
                          describe_step(step.step, units))

    def summary(self, units: str) -> Text:
        assert self.plan is not None
        glyphs = self.app.glyphs
        return summary_text(self.plan, units, time.time(), glyphs.plain(OPEN_MARK),
                            self.prediction(units), glyphs.plain(WARN_MARK))

    def action_start(self) -> None:
        if self.plan is None:
            self.notify("This profile has mistakes: fix them first.", severity="error")
            return
        if self.start is None:
            self.notify("Starting runs is not available here.", severity="warning")
            return
        units = self.app.units
        details = self.summary(units).plain + "\n\n" + "\n".join(
            f"{s.index + 1}. {describe_step(s.step, units)}" for s in self.plan.steps
        ) + f"\n\n{SAFETY}"
        path, start = self.path, self.start
        self.app.push_screen(
            ConfirmScreen(f"Start “{self.plan.profile.name}” now?", details, yes="start it"),
            lambda yes: start(path) if yes else None)

    def action_switch_units(self) -> None:
        self.app.units = "F" if self.app.units == "C" else "C"

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self, ABOUT))

    def action_back(self) -> None:
        self.app.pop_screen() if len(self.app.screen_stack) > 2 else self.app.exit("")
