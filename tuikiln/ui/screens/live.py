"""The live run: chart, big numbers, the step in words, alarms, the event log, controls.

The screen reads the run log in a worker (new samples only, so it never freezes as the log
grows) and asks the engine for its status; keys become engine commands. Leaving the screen
leaves the run going: it belongs to the engine, not to the screen.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING, Any

from textual import events, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.css.query import NoMatches
from textual.screen import Screen
from textual.widgets import Static

from tuikiln.engine.states import SCREEN_BELL, RunState, StepState
from tuikiln.engine.status import Status
from tuikiln.profile import Pause
from tuikiln.ui.chartdata import LAST_HOUR, WHOLE_RUN, live_chart
from tuikiln.ui.runfeed import RunHeader, RunLink, SampleBuffer, finite
from tuikiln.ui.screens.confirm import ConfirmScreen
from tuikiln.ui.screens.help import HelpScreen
from tuikiln.ui.screens.note import NoteScreen
from tuikiln.ui.widgets.alarm_banner import AlarmBanner
from tuikiln.ui.widgets.chart import TemperatureChart
from tuikiln.ui.widgets.event_log import EventLog
from tuikiln.ui.widgets.key_footer import KeyFooter
from tuikiln.ui.widgets.readout import Readout
from tuikiln.ui.widgets.textupdate import update_in_place
from tuikiln.ui.words import ACK_KEY, unacknowledged
from tuikiln.units import format_duration

if TYPE_CHECKING:
    from textual import getters

    from tuikiln.ui.app import TuikilnApp

ABOUT = ("The live run. The chart shows the chamber, the load (or its estimated core), the "
         "setpoint so far and the plan ahead of now (dashed). Leaving with q leaves the run "
         "going; come back with `tuikiln watch`.")


class LiveScreen(Screen[None]):
    """Follows one run through a RunLink."""

    if TYPE_CHECKING:  # the app every screen runs in, for the checker (no runtime check)
        app = getters.app(TuikilnApp)

    # Every key but the bell's fits the footer at 80 columns (short words, compact footer);
    # the help (?) gives each its long words. Order: the run's keys first, then the way out.
    BINDINGS = [
        Binding("a", "acknowledge", "Ack", tooltip="Acknowledge the alarms or the pause"),
        Binding("p", "pause", "Pause", tooltip="Pause: hold the setpoint, stop the clocks"),
        Binding("r", "resume", "Resume", tooltip="Resume a paused run"),
        Binding("s", "skip", "Skip", tooltip="Skip to the next step (asks first)"),
        Binding("x", "abort", "Abort", tooltip="Abort: heat off, setpoint down (asks first)"),
        Binding("n", "note", "Note", tooltip="Add a note to the run's log"),
        Binding("q", "leave", "Leave", tooltip="Leave the screen; the run goes on"),
        Binding("question_mark,f1", "help", "Help", tooltip="Every key, with what it does"),
        Binding("u", "switch_units", "°C/°F", tooltip="Show °C or °F"),
        Binding("z", "zoom", "Zoom", tooltip="Chart: the whole run or the last hour"),
        Binding("b", "toggle_bell", "Bell on/off", show=False),
    ]

    def __init__(
        self,
        link: RunLink,
        *,
        poll_s: float = 1.0,
        leave_words: str = "The run goes on. Come back to it with: tuikiln watch",
        auto_acknowledge_s: float | None = None,
        title: str = "",
    ) -> None:
        super().__init__()
        self.link = link
        self.poll_s = poll_s
        self.leave_words = leave_words
        self.auto_acknowledge_s = auto_acknowledge_s
        self.title_words = title
        self.header: RunHeader | None = None
        self.samples = SampleBuffer()
        self.status: Status | None = None
        self.last_event_id = 0
        self.zoom = WHOLE_RUN
        self.bell_on = True
        self.seen_alarms: set[tuple[str, Any]] = set()
        self.waiting_since: float | None = None
        self.ticks = 0
        self.title_shown = ""
        self.notice_shown = ""

    def compose(self) -> ComposeResult:
        yield Static("", id="live-title")
        # Full width under the title: the quench pause must be impossible to miss at 80x24.
        yield Static("", id="live-notice")
        with Horizontal(id="live-main"):
            yield TemperatureChart(id="live-chart")
            with Vertical(id="live-side"):
                yield Readout(id="live-readout")
        yield AlarmBanner(id="live-alarms")
        yield EventLog(id="live-events")
        yield KeyFooter()

    def on_mount(self) -> None:
        self.bell_on = bool(getattr(self.app, "bell_on", True))
        self.watch(self.app, "units", self.units_changed, init=True)
        self.follow_run()

    def on_resize(self, event: events.Resize) -> None:
        # Small terminals (80x24): a narrower side panel and a shorter log (app.tcss).
        self.set_class(event.size.width < 100, "-narrow")
        self.set_class(event.size.height < 30, "-short")

    # ----- reading the run -----

    @work(exclusive=True, group="live-follow")
    async def follow_run(self) -> None:
        """Read new samples and events, ask for the status, show them; again every poll_s."""
        self.header = await asyncio.to_thread(self.link.info)
        self.query_one(EventLog).started = self.header.started
        self.query_one(Readout).plan = self.header.plan
        while True:
            batch = await asyncio.to_thread(self.link.read_samples, self.samples.last_t)
            events = await asyncio.to_thread(self.link.read_events, self.last_event_id)
            try:
                status = await self.link.status()
            except Exception:  # the engine went away between two polls
                status = None
            try:
                self.take(batch, events, status)
            except NoMatches:  # the screen is being taken down (leaving, or the app ends)
                return
            await asyncio.sleep(self.poll_s)

    def take(self, batch: Mapping[str, Any], events: list | tuple | Any,
             status: Status | None) -> None:
        self.ticks += 1
        self.samples.append(batch)
        if events:
            self.last_event_id = max(int(e.get("id", 0)) for e in events)
            self.query_one(EventLog).add_events(events)
            if any(e.get("kind") in SCREEN_BELL for e in events):
                self.ring()
        self.status = status
        for alarm in unacknowledged(status):
            key = (str(alarm.get("code")), alarm.get("since"))
            if key not in self.seen_alarms:
                self.seen_alarms.add(key)
                self.ring()
        self.show()
        self.maybe_auto_acknowledge()

    def now(self) -> float:
        if self.status and finite(self.status.get("time")) is not None:
            return float(self.status["time"])
        last = self.samples.last_t
        return last if last is not None else (self.header.started if self.header else 0.0)

    def show(self) -> None:
        if self.header is None:
            return
        units = self.app.units
        header = self.header
        running = self.status is not None
        self.query_one(TemperatureChart).spec = live_chart(
            header.plan, self.samples, self.status, header.started, self.now(), units,
            zoom=self.zoom)
        # What the readout shows: the engine's status, or the last sample's figures when no
        # engine answers (a partial status: the screens read it with .get).
        status: dict[str, Any] = dict(self.status) if self.status else self.last_reading_status()
        readout = self.query_one(Readout)
        readout.units = units
        readout.status = status
        banner = self.query_one(AlarmBanner)
        banner.units = units
        banner.alarms = list(status.get("alarms") or ())
        banner.safe_state = status.get("safe_state")
        elapsed = format_duration(max(0.0, self.now() - header.started))
        # Most telling first: a narrow terminal cuts the end of the line off.
        parts = [f"run {header.run_id}: {header.profile.name}", f"{elapsed} in",
                 f"chart: {self.zoom}", self.title_words or f"tuikiln · {header.kiln_name}"]
        if not running:
            parts.insert(0, "READ ONLY (the engine is not running this run)")
        words = " · ".join(parts)
        if words != self.title_shown:
            self.title_shown = words
            update_in_place(self.query_one("#live-title", Static), words)

    def last_reading_status(self) -> dict[str, Any]:
        """For a run with no engine: its last sample as a status object."""
        if not len(self.samples):
            return {"state": RunState.ENDED}
        last = {name: float(self.samples.column(name)[-1]) for name in
                ("chamber_c", "load_c", "core_c", "setpoint_c", "output_pct")}
        step = int(self.samples.column("step")[-1])
        outcome = self.header.outcome if self.header else None
        return {**last, "state": RunState.ENDED, "step": step if step >= 0 else None,
                "step_state": outcome or RunState.ENDED, "step_words": outcome or "no engine"}

    def units_changed(self, units: str) -> None:
        self.query_one(EventLog).units = units
        self.show()

    def ring(self) -> None:
        if self.bell_on:
            self.app.bell()

    def maybe_auto_acknowledge(self) -> None:
        waiting = self.status is not None and self.status.get("step_state") == StepState.WAITING_YOU
        if not waiting:
            self.waiting_since = None
            self.show_notice("")
            return
        banner = self.app.glyphs.plain(
            f"☛ WAITING FOR YOU: {self.pause_message()}  [press {ACK_KEY}]")
        if self.auto_acknowledge_s is None:
            self.show_notice(banner)
            return
        if self.waiting_since is None:
            self.waiting_since = time.monotonic()
        left = self.auto_acknowledge_s - (time.monotonic() - self.waiting_since)
        if left <= 0:
            self.waiting_since = None
            self.show_notice("The demo acknowledged the pause by itself.")
            self.send("ack", "pause")
        else:
            self.show_notice(f"{banner}  (the demo goes on by itself in {left:.0f} s)")

    def pause_message(self) -> str:
        index = self.status.get("step") if self.status else None
        if self.header and isinstance(index, int) and 0 <= index < len(self.header.plan.steps):
            step = self.header.plan.steps[index].step
            if isinstance(step, Pause):
                return step.message
        return "the oven waits for you"

    def show_notice(self, words: str) -> None:
        if words == self.notice_shown:
            return
        self.notice_shown = words
        notice = self.query_one("#live-notice", Static)
        notice.set_class(bool(words), "-active")
        update_in_place(notice, words)

    # ----- commands -----

    def send_if_yes(self, name: str) -> Callable[[bool | None], None]:
        """The answer to a confirmation: send the command `name` on a yes."""
        def answer(yes: bool | None) -> None:
            if yes:
                self.send(name)
        return answer

    @work(group="live-commands")
    async def send(self, name: str, arg: str | None = None) -> None:
        try:
            accepted, words = await self.link.command(name, arg)
        except Exception as exc:  # the engine or its socket went away
            accepted, words = False, f"{name}: the run did not answer ({exc})"
        self.notify(words or name, severity="information" if accepted else "error",
                    timeout=4 if accepted else 8)

    def action_acknowledge(self) -> None:
        self.send("ack")

    def action_pause(self) -> None:
        self.send("pause")

    def action_resume(self) -> None:
        self.send("resume")

    def action_skip(self) -> None:
        words = "this step"
        if self.header and self.status and isinstance(self.status.get("step"), int):
            index = self.status["step"]
            if 0 <= index < len(self.header.plan.steps):
                from tuikiln.profile import describe_step

                step = self.header.plan.steps[index].step
                words = f"step {index + 1} ({describe_step(step, self.app.units)})"
        self.app.push_screen(
            ConfirmScreen(f"Skip {words} and go on to the next one?", yes="skip it"),
            self.send_if_yes("skip"))

    def action_abort(self) -> None:
        self.app.push_screen(
            ConfirmScreen("Abort the run? The heating stops and the setpoint goes down; "
                          "the run cannot be resumed.", yes="abort the run"),
            self.send_if_yes("abort"))

    def action_note(self) -> None:
        def take_note(text: str | None) -> None:
            if text:
                self.send("note", text)

        self.app.push_screen(NoteScreen(), take_note)

    def action_switch_units(self) -> None:
        self.app.units = "F" if self.app.units == "C" else "C"

    def action_zoom(self) -> None:
        self.zoom = LAST_HOUR if self.zoom == WHOLE_RUN else WHOLE_RUN
        self.show()

    def action_toggle_bell(self) -> None:
        self.bell_on = not self.bell_on
        self.notify("bell on" if self.bell_on else "bell off")

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self, ABOUT))

    def action_leave(self) -> None:
        words = self.leave_words
        if (self.status is not None and self.status.get("state") == RunState.ENDED
                and "goes on" in words):  # the words for a run that is still going
            words = f"Run {self.status.get('run')} has ended: see it with `tuikiln replay last`."
        leave: Callable[[str], None] | None = getattr(self.app, "leave", None)
        if leave is not None:
            leave(words)
        else:
            self.app.exit(words)
