"""Crash trials in CI (quick setting): the engine killed with SIGKILL at random moments while a
served simulator (`tuikiln sim serve --tcp`, its own process) keeps the oven, then started
again with `tuikiln run --resume --headless`. See tests/crash_trials.py for the checks and
for many more trials (`--trials N`). The rules checked are tuikiln's own design."""

from __future__ import annotations

from tests.crash_trials import Trial, run_trials


def test_kill_9_at_random_moments_power_cut_and_hold_safe():
    trials = [
        Trial("continue", seed=11, kills=1, hold_s=3),
        Trial("continue, power cut", seed=12, kills=1, hold_s=3, power_cut=True),
        Trial("hold safe", seed=13, kills=1, hold_s=3, policy="hold"),
        Trial("end", seed=14, kills=1, hold_s=3, policy="end"),
    ]
    results = run_trials(trials)
    for result in results:
        assert result.ok, f"{result.name}: {result.problems}"
        assert result.kills and max(result.lost_samples) <= 1
    cut = results[1].gaps[0]
    assert cut["after_c"] < cut["before_c"]
