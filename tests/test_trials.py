"""Profile trials (issue 16): no false alarms on any sensible profile, the right alarm on a
fault. Random valid profiles (tests/trials.py) run on the in-process simulator at full
speed; every profile that once raised a false alarm is kept in tests/trial_profiles/.

Fault-to-alarm expectations are tuikiln's own design (tuikiln/engine/alarms.py). A fixed
seed keeps the property test reproducible and under a minute; `--slow` runs many more.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs

from tests.trials import FAULTS, OVERSHOOTING, run_profile, trials
from tuikiln.engine import states as st

CORPUS = sorted((Path(__file__).parent / "trial_profiles").glob("*.toml"))


@pytest.mark.parametrize("profile", CORPUS, ids=lambda p: p.stem)
async def test_a_profile_that_once_raised_a_false_alarm_runs_clean(profile):
    result = await run_profile(profile.read_text())
    assert result.raised == []
    assert result.outcome == st.COMPLETED


def trial_settings(request: pytest.FixtureRequest, quick: int, slow: int) -> settings:
    return settings(max_examples=slow if request.config.getoption("--slow") else quick,
                    derandomize=True, deadline=None, database=None,
                    suppress_health_check=[HealthCheck.too_slow,
                                           HealthCheck.function_scoped_fixture])


def test_random_profiles_run_clean(request):
    @trial_settings(request, quick=8, slow=300)
    @given(trials())
    def check(trial):
        import asyncio

        result = asyncio.run(run_profile(trial.toml(), seed=trial.seed))
        assert (result.outcome, result.raised) == (st.COMPLETED, []), trial.toml()

    check()


def test_random_profiles_with_a_fault_raise_the_right_alarm(request):
    @trial_settings(request, quick=6, slow=150)
    @given(trials(max_steps=4), hs.sampled_from(sorted(FAULTS)), hs.integers(2, 60))
    def check(trial, fault, at_min):
        import asyncio

        # A long last hold keeps the run going past the fault, whatever came before.
        trial.steps.append({"hold": "3h", "start": "reached"})
        table, right = FAULTS[fault]
        faults = f'[[device.fault]]\nat = "{at_min}m"\n{table}'
        result = asyncio.run(run_profile(trial.toml(), seed=trial.seed, faults=faults))
        critical = [code for code in result.raised if code in right]
        assert critical and result.outcome == st.STOPPED_BY_ALARM, (fault, at_min, trial.toml(),
                                                                    result.raised)

    check()


@pytest.mark.parametrize("to_c", [150, 400, 650])
async def test_an_overshooting_controller_is_too_hot(to_c):
    text = f'units = "C"\n[[step]]\nramp = "max"\nto = {to_c}\n[[step]]\nhold = "20m"\n'
    result = await run_profile(text, device_extra=OVERSHOOTING)
    assert result.raised and result.raised[0] == "too-hot"
    clean = await run_profile(text)  # the same profile, a well tuned controller
    assert clean.raised == [] and clean.outcome == st.COMPLETED
