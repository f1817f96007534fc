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

from tests.trials import run_profile, trials
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

        result = asyncio.run(run_profile(trial.toml()))
        assert (result.outcome, result.raised) == (st.COMPLETED, []), trial.toml()

    check()
