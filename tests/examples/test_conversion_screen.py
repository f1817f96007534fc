"""The toy screen of tests/examples/conversion_screen.py, through Textual's Pilot."""

from __future__ import annotations

from textual.widgets import DataTable, Static

from tests.examples.conversion_screen import ConversionScreen
from tuikiln.ui.app import TuikilnApp
from tuikiln.ui.screens.help import HelpScreen


def rows(screen: ConversionScreen) -> list[tuple[str, ...]]:
    table = screen.query_one(DataTable)
    return [tuple(str(cell) for cell in table.get_row_at(i)) for i in range(table.row_count)]


async def test_the_table_converts_and_u_swaps_the_columns() -> None:
    app = TuikilnApp(ConversionScreen, units="C")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        screen = app.screen
        assert isinstance(screen, ConversionScreen)
        # t/°F = 1.8 t/°C + 32 (NIST SP 811, 2008, B.9: the conversion is exact).
        assert rows(screen)[7] == ("800 °C", "1472 °F")
        assert rows(screen)[-1] == ("1200 °C", "2192 °F")
        await pilot.press("u")
        await pilot.pause()
        assert app.units == "F"
        assert rows(screen)[7] == ("1472 °F", "800 °C")


async def test_help_names_every_key_and_q_leaves() -> None:
    app = TuikilnApp(ConversionScreen, units="C")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        text = "".join(str(widget.render()) for widget in app.screen.query(Static))
        for words in ("°C/°F", "Help", "Back"):
            assert words in text
        await pilot.press("escape")
        await pilot.press("q")
        await pilot.pause()
    assert app.return_value == ""
