"""The big numbers: chamber temperature, target, load, the step in words, the times ahead."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.reactive import reactive
from textual.widgets import Digits, Static

from tuikiln.engine.states import StepState
from tuikiln.plan import Plan
from tuikiln.ui.glyphs import BRAILLE_GLYPHS
from tuikiln.ui.runfeed import finite
from tuikiln.ui.widgets.textupdate import update_in_place
from tuikiln.ui.words import RUN_STATE_WORDS, step_title, step_words, times_ahead
from tuikiln.units import Units, format_temp, from_c, symbol


class Readout(Vertical):
    """Shows one status object; the screen sets `status`, `plan` and `units`."""

    DEFAULT_CSS = """
    Readout {
        height: auto;
        padding: 0 1;
    }
    Readout #big-row { height: 3; }
    Readout #big { width: auto; }
    Readout #big-unit { width: 3; padding: 0 0 0 1; }
    Readout .line { height: auto; }
    Readout #run-state { text-style: bold; }
    /* Big digits are drawn with box corners a console font lacks: "chamber" below says it. */
    Readout.-plain #big-row, Readout.-plain #big-label { display: none; }
    """

    status: reactive[Mapping[str, Any] | None] = reactive(None, always_update=True)
    """The live status object (as `tuikiln status --json` prints it), or None."""
    units: reactive[Units] = reactive("C")
    """Units every temperature is shown in."""
    plan: reactive[Plan | None] = reactive(None)
    """The run's plan, for the step's label and planned length."""

    def compose(self) -> ComposeResult:
        yield Static("chamber", classes="line", id="big-label")
        with Horizontal(id="big-row"):
            yield Digits("--", id="big")
            yield Static("", id="big-unit")
        yield Static("", classes="line", id="temps")
        yield Static("", classes="line", id="run-state")
        yield Static("", classes="line", id="step-title")
        yield Static("", classes="line", id="step-words")
        yield Static("", classes="line", id="times")

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._shown: dict[str, str] = {}

    def put(self, selector: str, content: str | Text) -> None:
        """Update one line only when its text changed, and lay the screen out again only
        when its height changed: a layout pass costs more than everything else a second
        of watching does."""
        plain = content.plain if isinstance(content, Text) else content
        if self._shown.get(selector) == plain:
            return
        self._shown[selector] = plain
        update_in_place(self.query_one(selector, Static), content)

    def on_mount(self) -> None:
        self.set_class(not getattr(self.app, "glyphs", BRAILLE_GLYPHS).braille, "-plain")

    def watch_status(self) -> None:
        self.show()

    def watch_units(self) -> None:
        self.show()

    def show(self) -> None:
        if not self.is_mounted:
            return
        status = self.status or {}
        units = self.units
        chamber = finite(status.get("chamber_c"))
        big = f"{from_c(chamber, units):.0f}" if chamber is not None else "--"
        if self._shown.get("#big") != big:
            self._shown["#big"] = big
            self.query_one("#big", Digits).update(big)
        self.put("#big-unit", symbol(units))
        load = finite(status.get("load_c"))
        core = finite(status.get("core_c"))
        lines = Text()
        lines.append(f"chamber {format_temp(chamber, units)}\n", style="bold")
        lines.append(f"target  {format_temp(finite(status.get('target_c')), units)}\n")
        if load is not None:
            lines.append(f"load    {format_temp(load, units)}\n")
        if core is not None:
            lines.append(f"core    {format_temp(core, units)} (estimate)\n")
        output = finite(status.get("output_pct"))
        lines.append(f"heater  {output:.0f} %" if output is not None else "heater  --")
        setpoint = finite(status.get("setpoint_c"))
        if status.get("step_state") == StepState.COASTING and (setpoint is None or setpoint <= 1.0):
            lines.append(" · heat off")  # a free cool: the setpoint is only "as low as it goes"
        else:
            lines.append(f" · set {format_temp(setpoint, units)}")
        self.put("#temps", lines)
        state = str(status.get("state") or "")
        words = RUN_STATE_WORDS.get(state, state)
        if status.get("watch_only"):
            words += " (watching only)"
        self.put("#run-state", f"run: {words}" if words else "")
        self.put("#step-title", step_title(status, self.plan))
        self.put("#step-words",
            Text(step_words(status, self.plan, units), style="bold"))
        times = Text()
        for label, value in times_ahead(status):
            times.append(f"{label:<14}{value}\n")
        times.rstrip()
        self.put("#times", times)
