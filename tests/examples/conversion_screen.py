"""A toy screen, written by following docs/CONTRIBUTING.md "A screen".

In the project it would be tuikiln/ui/screens/conversion.py, opened by a key on the home
screen; here it lives with the tests so it does not ship. It shows the usual heat-treatment
temperatures in the units on show and in the other ones, for people who read a handbook in
°F and an oven in °C.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from textual.app import ComposeResult
from textual.binding import Binding
from textual.screen import Screen
from textual.widgets import DataTable, Static

from tuikiln.ui.screens.help import HelpScreen
from tuikiln.ui.widgets.key_footer import KeyFooter
from tuikiln.units import format_temp

if TYPE_CHECKING:
    from textual import getters

    from tuikiln.ui.app import TuikilnApp

ABOUT = "Temperatures in both units: the one on show first, u switches."
TEMPERATURES_C = tuple(float(t) for t in range(100, 1300, 100))


class ConversionScreen(Screen[None]):
    """A table of temperatures in °C and °F; u swaps which comes first."""

    if TYPE_CHECKING:
        app = getters.app(TuikilnApp)

    BINDINGS = [
        Binding("u", "switch_units", "°C/°F"),
        Binding("question_mark,f1", "help", "Help"),
        Binding("escape,q", "back", "Back"),
    ]

    def compose(self) -> ComposeResult:
        yield Static("Temperatures in both units", id="conversion-title")
        yield DataTable(id="conversion-table", cursor_type="row", zebra_stripes=True)
        yield KeyFooter()

    def on_mount(self) -> None:
        # Redrawn whenever the app's units change (u here, or on any other screen).
        self.watch(self.app, "units", self.show, init=True)

    def show(self, _units: str | None = None) -> None:
        shown = self.app.units
        other = "F" if shown == "C" else "C"
        table = self.query_one(DataTable)
        table.clear(columns=True)
        table.add_columns(f"°{shown}", f"°{other}")
        for celsius in TEMPERATURES_C:
            table.add_row(format_temp(celsius, shown), format_temp(celsius, other))

    def action_switch_units(self) -> None:
        self.app.units = "F" if self.app.units == "C" else "C"

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self, ABOUT))

    def action_back(self) -> None:
        self.app.leave("")
