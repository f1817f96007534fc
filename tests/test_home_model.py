"""The home screen's profile totals come from the learned oven when the kiln has one.

The model's numbers are invented (demo data): only the screen's use of it is tested here;
the model's truth is tests/test_ovenmodel.py's and test_plan_model.py's.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.test_ui_fakes import shown
from tests.waiting import eventually
from tuikiln.ovenmodel import OvenModel
from tuikiln.ovenmodel_plan import predict
from tuikiln.ovenmodel_store import save_model
from tuikiln.plan import plan_profile
from tuikiln.profile import load_profile
from tuikiln.ui.app import TuikilnApp
from tuikiln.ui.launcher import Launcher, find_profiles
from tuikiln.ui.screens.home import HomeScreen
from tuikiln.units import format_duration

INVENTED = OvenModel(heat_c_per_s=0.45, loss_per_s=1.0e-4, radiation_per_s_k3=5e-14,
                     lining_per_s=2e-4, lining_tau_s=2400.0, room_c=20.0, dead_time_s=6.0,
                     rms_c_per_min=0.1, sim_rms_c=2.0, valid_from_c=20.0, valid_to_c=850.0,
                     seconds=14000.0)


async def test_home_totals_are_the_ovens(tmp_path: Path) -> None:
    launcher = Launcher(tmp_path, None)
    save_model(launcher.data_dir, launcher.kiln.name, INVENTED)
    demo = next(p for p in find_profiles() if p.name == "demo-harden-temper.toml")
    profile = load_profile(demo, max_c=launcher.kiln.max_c)
    predicted = predict(plan_profile(profile), INVENTED, 15.0 * 5 / 9).total_s
    assert predicted is not None
    wanted = "~" + format_duration(predicted)
    app = TuikilnApp(lambda: HomeScreen(launcher), units="F")
    async with app.run_test(size=(120, 30)) as pilot:
        assert wanted in await shown(pilot, wanted)


async def test_preview_shows_what_the_learned_oven_takes_as_plan_says(tmp_path: Path) -> None:
    """Opened from home, the preview puts the learned oven's total, end time, each step's
    length and the model's warnings beside the plan's own figures: the same numbers
    `tuikiln plan --json` gives for this kiln (its predicted_total_s and step ends)."""
    import json
    import subprocess
    import sys

    from tuikiln.ui.screens.preview import PreviewScreen

    launcher = Launcher(tmp_path, None)
    save_model(launcher.data_dir, launcher.kiln.name, INVENTED)
    demo = next(p for p in find_profiles() if p.name == "demo-harden-temper.toml")
    done = subprocess.run([sys.executable, "-m", "tuikiln", "plan", str(demo), "--json",
                           "--data", str(launcher.data_dir)], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    planned = json.loads(done.stdout)
    total = planned["predicted_total_s"]
    assert total is not None and total > planned["total_s"]  # the 'max' ramp and the waits
    lengths = [format_duration(s["predicted_end_s"] - s["predicted_start_s"])
               for s in planned["steps"] if s["kind"] != "pause"]
    app = TuikilnApp(lambda: HomeScreen(launcher), units=planned["units"])
    async with app.run_test(size=(140, 40)) as pilot:
        home = pilot.app.screen
        await eventually(lambda: home.profile_paths, 20, "the home screen's list of profiles")
        row = home.profile_paths.index(demo)
        home.query_one("#home-profiles").move_cursor(row=row)
        home.query_one("#home-profiles").focus()
        home.action_open()
        text = await shown(pilot, f"on this oven (learned): about {format_duration(total)}",
                           *lengths, screen=PreviewScreen)
        assert isinstance(pilot.app.screen, PreviewScreen)
        assert f"on this oven (learned): about {format_duration(total)}" in text
        assert "this oven" in text  # the table's column
        for length in lengths:
            assert length in text
        for warning in planned["warnings"]:
            assert warning["text"][:40] in text.replace("\n", " ")


async def test_preview_without_a_learned_oven_shows_the_plan_alone(tmp_path: Path) -> None:
    from tuikiln.ui.screens.preview import PreviewScreen

    demo = next(p for p in find_profiles() if p.name == "demo-harden-temper.toml")
    app = TuikilnApp(lambda: PreviewScreen(demo), units="C")
    async with app.run_test(size=(140, 40)) as pilot:
        text = await shown(pilot, "total at least", "counted at their shortest")
        assert "total at least" in text and "counted at their shortest" in text
        assert "on this oven" not in text and "this oven" not in text


class SlowLauncher(Launcher):
    """A launcher that finds the going run slowly (a control socket slow to answer): it
    waits for `release` before answering, in the thread the screen awaits."""

    def __init__(self, *args, **kwargs) -> None:  # noqa: ANN002, ANN003
        import threading

        super().__init__(*args, **kwargs)
        self.release = threading.Event()
        self.asked = threading.Event()

    def going_run(self):  # noqa: ANN201
        self.asked.set()
        self.release.wait(10.0)
        return super().going_run()


@pytest.mark.parametrize("late_s", [0.0, 0.02])
async def test_leaving_home_while_it_reads_the_log_is_quiet(tmp_path: Path, late_s: float
                                                            ) -> None:
    """The home screen reads profiles and runs off the loop; an app that quits meanwhile
    must not fail when the answer comes back to a screen that is gone (it did: a
    traceback, "No nodes match '#home-kiln'")."""
    import threading

    launcher = SlowLauncher(tmp_path, None)
    app = TuikilnApp(lambda: HomeScreen(launcher), units="C")
    async with app.run_test(size=(120, 30)):
        await eventually(launcher.asked.is_set, 10.0, "home asking for the going run")
        # The answer arrives while the app is taking its screens down.
        threading.Timer(late_s, launcher.release.set).start()
    assert app.return_code in (None, 0)


async def test_preview_with_a_model_and_no_kiln_alarms(tmp_path: Path) -> None:
    """A preview given the learned oven but no kiln alarms (its defaults) predicts with the
    built-in limits; it failed on the missing alarms before."""
    from tuikiln.ui.screens.preview import PreviewScreen

    demo = next(p for p in find_profiles() if p.name == "demo-harden-temper.toml")
    app = TuikilnApp(lambda: PreviewScreen(demo, model=INVENTED), units="C")
    async with app.run_test(size=(140, 40)) as pilot:
        await shown(pilot, "on this oven (learned): about")
