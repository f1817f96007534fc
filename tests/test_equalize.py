"""The equalization detector on synthetic curves with known answers, the ETA, replay, and one
real run of the simulator for each source (load thermocouple, core estimate)."""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path

import numpy as np
import pytest

from tuikiln.equalize import (
    CORE_ESTIMATE,
    EVEN,
    LOAD_TC,
    EqualizeDetector,
    LoadWatch,
    detect_over,
    rule_of_thumb_s,
)
from tuikiln.limits import Limits

LIMITS = Limits()
TARGET = 800.0
BAND = 8.0


def _detector(**kw) -> EqualizeDetector:
    args = dict(target_c=TARGET, band_c=BAND, window_s=LIMITS.equalize_window,
                slope_limit_c_per_s=LIMITS.equalize_slope / 60.0,
                confirm_s=LIMITS.equalize_confirm)
    args.update(kw)
    return EqualizeDetector(**args)


def _run(curve, seconds: int, noise: float = 0.0, seed: int = 0, quantise: bool = True,
         **kw):
    """Feed `curve(t)` (true °C) once a second with noise and whole-degree readings; the
    declared time (or None) and the true temperatures."""
    rng = np.random.default_rng(seed)
    det = _detector(**kw)
    truth = []
    for t in range(seconds):
        true = curve(float(t))
        truth.append(true)
        reading = true + (rng.normal(0.0, noise) if noise else 0.0)
        status = det.update(float(t), float(round(reading)) if quantise else reading)
        if status.equalized:
            return status.since, np.asarray(truth), status
    return None, np.asarray(truth), status


def _bench_module():
    """tests/bench/equalize.py, loaded by path as tests/bench/run.py loads it."""
    path = Path(__file__).resolve().parent / "bench" / "equalize.py"
    spec = importlib.util.spec_from_file_location("bench_equalize_for_test", path)
    assert spec and spec.loader
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # its dataclasses look their module up
    spec.loader.exec_module(module)
    return module


def _entered_for_good(truth: np.ndarray) -> int:
    outside = np.flatnonzero(np.abs(truth - TARGET) > BAND)
    return int(outside[-1] + 1) if outside.size else 0


def test_noisy_flat_at_the_target_is_declared_soon():
    since, _, status = _run(lambda t: TARGET + 0.3, 1200, noise=3.0)
    assert since is not None
    assert since <= LIMITS.equalize_window + 4 * LIMITS.equalize_confirm
    assert status.state == EVEN and status.equalized
    assert "hold clock" in status.words


@pytest.mark.parametrize("seed", range(5))
def test_noisy_flat_just_outside_the_band_is_never_declared(seed):
    # 10 K below with 3 K of noise: single readings fall inside the band every few seconds
    since, _, status = _run(lambda t: TARGET - 10.0, 3000, noise=3.0, seed=seed)
    assert since is None
    assert status.state == "heating-up"


def test_slow_drift_outside_the_band_waits_for_the_band():
    # 0.2 K/min is below the slope limit, but the load is still 20 K short
    since, truth, _ = _run(lambda t: TARGET - 20.0 + 0.2 * t / 60.0, 7200, noise=1.0)
    assert since is not None
    assert since >= _entered_for_good(truth)


def test_drifting_away_inside_the_band_is_not_level():
    # in the band but running away from the target at 1.5 K/min: it will leave the band
    since, _, status = _run(lambda t: TARGET - 1.0 + 1.5 * t / 60.0, 340, noise=0.5)
    assert since is None
    assert status.state in ("levelling", "coming-down")


def test_overshoot_then_settle_waits_for_the_last_entry():
    # An underdamped approach: through the band at t~300 s, 22 K over at t~600 s, back in
    # and settling afterwards.
    def curve(t: float) -> float:
        return TARGET - 100.0 * math.exp(-t / 400.0) * math.cos(2 * math.pi * t / 1200.0)

    since, truth, _ = _run(curve, 6000, noise=1.5)
    assert since is not None
    assert since >= _entered_for_good(truth)
    assert since > 700  # not on the first pass through the band


def test_whole_degree_readings_at_the_band_edge_do_not_fool_it():
    # 8.4 K below reads as 792, exactly on the band's edge: not even
    since, _, _ = _run(lambda t: TARGET - 8.4, 2000)
    assert since is None
    # 7.4 K below reads 793: inside, and declared
    since, _, _ = _run(lambda t: TARGET - 7.4, 2000)
    assert since is not None


def test_eta_converges_on_an_exponential_approach():
    tau = 600.0

    def curve(t: float) -> float:
        return TARGET - 780.0 * math.exp(-t / tau)

    det = _detector(thickness_m=0.006)
    predictions = {}
    declared = None
    for t in range(6000):
        status = det.update(float(t), round(curve(t), 1))
        if t in (1200, 1600, 2000) and status.eta_s is not None:
            predictions[t] = (t + status.eta_s, status.eta_sigma_s)
        if status.equalized:
            declared = status.since
            break
    assert declared is not None
    errors = {t: abs(p - declared) for t, (p, _) in predictions.items()}
    assert set(errors) == {1200, 1600, 2000}
    assert errors[2000] <= 0.05 * (declared - 2000) + 30.0
    assert errors[1200] <= 0.10 * (declared - 1200) + 30.0
    assert errors[2000] <= errors[1200] + 1.0
    assert status.rule_of_thumb_s == pytest.approx(0.006 / 0.0254 * 3600.0)


def test_replay_reproduces_the_live_decision():
    rng = np.random.default_rng(11)
    times = np.arange(0.0, 5000.0, 1.0)
    temps = np.round(TARGET - 700.0 * np.exp(-times / 500.0) + rng.normal(0.0, 2.0, times.size))
    live = _detector()
    live_since = None
    for t, v in zip(times.tolist(), temps.tolist(), strict=True):
        status = live.update(t, v)
        if status.equalized:
            live_since = status.since
            break
    replayed = detect_over(times, temps, TARGET, BAND, LIMITS.equalize_window,
                           LIMITS.equalize_slope / 60.0, LIMITS.equalize_confirm)
    assert live_since is not None and replayed == live_since


def test_watch_primes_a_late_detector_with_history_and_picks_its_source():
    watch = LoadWatch("1084", 0.004, window_s=LIMITS.equalize_window,
                      slope_limit_c_per_s=LIMITS.equalize_slope / 60.0,
                      confirm_s=LIMITS.equalize_confirm)
    assert watch.update(0.0, 20.0) is None  # no hold watched yet
    for t in range(1, 600):
        watch.update(float(t), TARGET, TARGET - 2.0)
    watch.begin_hold(TARGET, BAND)
    status = watch.update(600.0, TARGET, TARGET - 2.0)
    assert status is not None and status.source == LOAD_TC
    assert status.equalized  # the history already shows a level load in the band
    watch.reset_load(20.0)
    watch.begin_hold(TARGET, BAND)
    status = watch.update(601.0, TARGET, None)  # the load thermocouple has gone
    assert status is not None and status.source == CORE_ESTIMATE
    assert not status.equalized and status.temp_c < 100.0


def test_plain_words_while_waiting():
    det = _detector(thickness_m=0.01)
    for t in range(400):
        status = det.update(float(t), 300.0 + 0.5 * t)
    assert status.state == "heating-up"
    assert status.words.startswith("waiting for the load to even out")
    det_f = _detector(units="F")
    status = det_f.update(0.0, 700.0)
    assert "°F" in status.words


@pytest.mark.parametrize(("kw", "words"), [
    ({"band_c": 0.0}, "band"), ({"slope_limit_c_per_s": -1.0}, "slope"),
    ({"confirm_s": -5.0}, "confirmation"), ({"window_s": 0.0}, "window"),
])
def test_bad_settings_are_refused_in_plain_words(kw, words):
    with pytest.raises(ValueError, match=words):
        _detector(**kw)


def test_rule_of_thumb_is_an_hour_per_inch():
    # common practice, no source
    assert rule_of_thumb_s(0.0254) == pytest.approx(3600.0)
    assert rule_of_thumb_s(None) is None


@pytest.mark.parametrize("load_tc", [True, False])
def test_simulated_oven_is_never_declared_before_its_real_core(load_tc):
    bench = _bench_module()
    scenario = bench.Scenario(seed=5, thickness_m=0.008, material="tool steel", noise_c=2.0,
                        load_tc=load_tc, eps_factor=0.5, h_factor=0.5, target_c=840.0,
                        ramp_c_per_h=None)
    outcome = bench.simulate(scenario, LIMITS)
    assert outcome.truth_s is not None and outcome.declared_s is not None
    assert outcome.late_s >= 0.0
    assert outcome.late_s <= (120.0 if load_tc else 0.2 * outcome.truth_s)
