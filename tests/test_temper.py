"""Hollomon-Jaffe tempering parameter: formula, equivalent time, traces, double temper, command."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from tuikiln import cli
from tuikiln.analysis.temper import (
    combined_parameter,
    equivalent_hours,
    parameter,
    trace_parameter,
)


def f_to_c(fahrenheit: float) -> float:
    return (fahrenheit - 32.0) * 5.0 / 9.0


# Formula: J. H. Hollomon and L. D. Jaffe, Trans. AIME 162 (1945): P = T (C + log10 t), T in K,
# t in h. Worked values computed by hand:
#   600 °F = (600 - 32) * 5/9 = 315.556 °C = 588.706 K; log10 2 = 0.30103
#   P = 588.706 * (20 + 0.30103) = 588.706 * 20.30103 = 11,951.3
#   650 °F = 343.333 °C = 616.483 K; P / T = 11,951.3 / 616.483 = 19.3863
#   t = 10 ** (19.3863 - 20) = 10 ** -0.6137 = 0.2434 h
def test_two_hours_at_600f_worked_value() -> None:
    assert parameter(f_to_c(600), 2.0, c=20) == pytest.approx(11_951.3, abs=0.5)


def test_same_parameter_at_650f_worked_value() -> None:
    p = parameter(f_to_c(600), 2.0)
    assert equivalent_hours(p, f_to_c(650)) == pytest.approx(0.2434, abs=0.0005)


def test_c_is_used() -> None:
    # Hollomon & Jaffe 1945 formula: P grows by T per unit of C.
    kelvin = 200.0 + 273.15
    assert parameter(200.0, 1.0, c=15) == pytest.approx(15 * kelvin)
    assert parameter(200.0, 1.0, c=20) - parameter(200.0, 1.0, c=15) == pytest.approx(5 * kelvin)


def test_one_hour_is_c_times_t() -> None:
    # log10 1 = 0, so P = T * C exactly (from the formula).
    assert parameter(0.0, 1.0) == pytest.approx(273.15 * 20)


@given(
    temp_c=st.floats(min_value=100.0, max_value=700.0),
    hours=st.floats(min_value=0.001, max_value=1000.0),
    c=st.floats(min_value=10.0, max_value=22.0),
)
def test_equivalent_hours_inverts_parameter(temp_c: float, hours: float, c: float) -> None:
    # The inverse of P = T (C + log10 t) at the same T is the original t (formula, Hollomon &
    # Jaffe 1945).
    assert equivalent_hours(parameter(temp_c, hours, c), temp_c, c) == pytest.approx(
        hours, rel=1e-9
    )


def test_bad_values_are_refused() -> None:
    with pytest.raises(ValueError, match="more than zero"):
        parameter(200.0, 0.0)
    with pytest.raises(ValueError, match="absolute zero"):
        parameter(-300.0, 1.0)


def _steps(*pieces: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """A trace of instant steps: (temp_c, seconds) pieces, each held flat."""
    times, temps, now = [], [], 0.0
    for temp_c, seconds in pieces:
        times += [now, now + seconds]
        temps += [temp_c, temp_c]
        now += seconds
    return np.array(times), np.array(temps)


def test_isothermal_trace_reproduces_formula() -> None:
    # Room, an instant step up, 2 h at 205 °C, an instant step down, room: only the hold counts,
    # so the trace must give the formula's value (Hollomon & Jaffe 1945) to rounding.
    time_s, temp_c = _steps((20.0, 600.0), (205.0, 7200.0), (20.0, 900.0))
    assert trace_parameter(time_s, temp_c) == pytest.approx(parameter(205.0, 2.0), rel=1e-9)


def test_isothermal_trace_sampled_every_second() -> None:
    time_s = np.arange(7201.0)
    temp_c = np.full_like(time_s, 315.0)
    assert trace_parameter(time_s, temp_c) == pytest.approx(parameter(315.0, 2.0), rel=1e-9)


def test_alternating_trace_steps_without_merging() -> None:
    # Sixty 1-minute pieces alternating 200/210 °C: stepping must follow the additive rule
    # piece by piece, checked against the formula applied by hand in a loop.
    pieces = [(200.0 if i % 2 == 0 else 210.0, 60.0) for i in range(60)]
    expected = parameter(200.0, 1 / 60)
    for temp_c, seconds in pieces[1:]:
        expected = parameter(temp_c, equivalent_hours(expected, temp_c) + seconds / 3600.0)
    assert trace_parameter(*_steps(*pieces)) == pytest.approx(expected, rel=1e-9)


def test_two_temperatures_follow_the_additive_rule() -> None:
    # Additive (equivalent-time) rule, Hollomon & Jaffe 1945 (from memory): the first hold's P
    # becomes an equivalent time at the second temperature, and the second hold's time is added.
    first = parameter(200.0, 1.0)
    expected = parameter(250.0, equivalent_hours(first, 250.0) + 1.0)
    assert combined_parameter([(200.0, 1.0), (250.0, 1.0)]) == pytest.approx(expected)
    traced = trace_parameter(*_steps((200.0, 3600.0), (250.0, 3600.0)))
    assert traced == pytest.approx(expected, rel=1e-9)


def test_double_temper_at_one_temperature_is_the_summed_time() -> None:
    # Equal temperatures: equivalent times simply add (formula + additive rule).
    assert combined_parameter([(205.0, 2.0), (205.0, 2.0)]) == pytest.approx(parameter(205.0, 4.0))
    # ...so a second temper adds T * log10 2, far less than a second full P.
    gain = combined_parameter([(205.0, 2.0), (205.0, 2.0)]) - parameter(205.0, 2.0)
    assert gain == pytest.approx((205.0 + 273.15) * math.log10(2.0))


def test_ramps_add_to_the_hold() -> None:
    # Ramping 100 °C/h from room to 400 °C, 2 h hold, cooling at 200 °C/h: the ramps temper a
    # little too, so P must exceed the hold's alone (common practice, no source).
    up = np.linspace(0.0, 3.8 * 3600.0, 2000)
    hold = np.linspace(up[-1], up[-1] + 7200.0, 200)[1:]
    down = np.linspace(hold[-1], hold[-1] + 1.9 * 3600.0, 1000)[1:]
    time_s = np.concatenate([up, hold, down])
    temp_c = np.concatenate(
        [
            20.0 + 100.0 * up / 3600.0,
            np.full(hold.size, 400.0),
            400.0 - 200.0 * (down - hold[-1]) / 3600.0,
        ]
    )
    traced = trace_parameter(time_s, temp_c)
    alone = parameter(400.0, 2.0)
    assert traced is not None and traced > alone
    # ...but by less than an hour's worth more at 400 °C, since the ramps are mostly cooler.
    assert traced < parameter(400.0, 3.0)


def test_cool_trace_gives_none_and_threshold_is_a_parameter() -> None:
    time_s, temp_c = _steps((90.0, 7200.0))
    assert trace_parameter(time_s, temp_c) is None
    assert trace_parameter(time_s, temp_c, threshold_c=50.0) == pytest.approx(parameter(90.0, 2.0))


def test_trace_refuses_time_going_backwards() -> None:
    with pytest.raises(ValueError, match="backwards"):
        trace_parameter(np.array([0.0, 10.0, 5.0]), np.array([200.0, 200.0, 200.0]))


# The command, through the real command line.


def test_command_json(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["temper", "600F", "2h", "--to", "650F", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert set(out) >= {"parameter", "equivalent_hours", "c", "temperature_c", "hours"}
    # Hand-computed above (Hollomon & Jaffe 1945 formula).
    assert out["parameter"] == pytest.approx(11_951.3, abs=0.5)
    assert out["equivalent_hours"] == pytest.approx(0.2434, abs=0.0005)
    assert out["c"] == 20
    assert out["temperature_c"] == pytest.approx(315.556, abs=0.001)
    assert out["hours"] == 2


def test_command_json_without_to(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["temper", "205C", "1h30m", "--c", "18", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["equivalent_hours"] is None
    assert out["parameter"] == pytest.approx(478.15 * (18 + math.log10(1.5)))


def test_command_text_says_c_depends_on_the_steel(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["temper", "400", "2h", "--units", "F", "--to", "425F"]) == 0
    out = capsys.readouterr().out
    assert "P = 9,696" in out  # 400 °F = 477.594 K; 477.594 * 20.30103 = 9,695.7 (by hand)
    assert "depends on the steel" in out


@pytest.mark.parametrize(
    ("argv", "words"),
    [
        (["temper", "400", "2h"], "needs a unit"),
        (["temper", "400F", "2"], "not a duration"),
        (["temper", "400F", "0m"], "no time at all"),
        (["temper", "hot", "2h"], "not a temperature"),
        (["temper", "400F", "2h", "--c", "-1"], "C must be"),
        (["temper", "400F", "2h", "--to", "warm"], "--to"),
    ],
)
def test_command_mistakes_exit_1_without_traceback(
    argv: list[str], words: str, capsys: pytest.CaptureFixture[str]
) -> None:
    assert cli.main(argv) == 1
    err = capsys.readouterr().err
    assert err.startswith("tuikiln: ") and words in err
    assert "Traceback" not in err


def test_fast_block_sum_matches_the_plain_loop_on_a_noisy_day() -> None:
    # A day-long 1 Hz hold with noise and a slow drift: the block solver must give the
    # additive rule's own result (the one-piece-at-a-time loop) to 1e-9 relative.
    from tuikiln.analysis.temper import _accumulate, _accumulate_loop

    rng = np.random.default_rng(7)
    seconds = 86_400
    kelvins = 478.0 + 2.0 * np.sin(np.arange(seconds) / 3000.0) + rng.normal(0, 0.4, seconds)
    hours = np.full(seconds, 1.0 / 3600.0)
    fast = _accumulate(kelvins, hours, 20.0)
    plain = _accumulate_loop(kelvins.tolist(), hours.tolist(), 20.0, None)
    assert fast == pytest.approx(plain, rel=1e-9)
