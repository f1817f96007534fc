"""Durations, rates, thicknesses and unit conversions (property-based)."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from tuikiln import units

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)


@given(finite)
def test_celsius_fahrenheit_round_trip(c: float) -> None:
    assert math.isclose(units.f_to_c(units.c_to_f(c)), c, rel_tol=1e-12, abs_tol=1e-9)
    assert math.isclose(units.c_to_f(units.f_to_c(c)), c, rel_tol=1e-12, abs_tol=1e-9)


@given(finite)
def test_differences_round_trip(d: float) -> None:
    assert math.isclose(units.delta_from_c(units.delta_to_c(d, "F"), "F"), d,
                        rel_tol=1e-12, abs_tol=1e-9)


def test_fixed_points() -> None:
    # Definition of the Fahrenheit scale against Celsius (ITS-90 fixed points of water at
    # one standard atmosphere: 0 °C = 32 °F, 100 °C = 212 °F); -40 is where they meet.
    assert units.c_to_f(0) == 32
    assert units.c_to_f(100) == 212
    assert units.f_to_c(-40) == -40
    assert units.to_c(1750, "F") == pytest.approx(954.4444444)


@given(st.integers(0, 99), st.integers(0, 59), st.integers(0, 59))
def test_duration_parts(h: int, m: int, s: int) -> None:
    text = "".join(f"{n}{u}" for n, u in ((h, "h"), (m, "m"), (s, "s")) if n) or "0s"
    assert units.parse_duration(text) == h * 3600 + m * 60 + s


@pytest.mark.parametrize(
    "text,seconds",
    [("90s", 90), ("15m", 900), ("2h", 7200), ("1h30m", 5400), ("1.5h", 5400), (600, 600)],
)
def test_durations_as_written(text: str, seconds: float) -> None:
    assert units.parse_duration(text) == seconds


@pytest.mark.parametrize("bad", ["", "15", "15x", "m15", "30m1h", "1h1h", "-5m", True, -3])
def test_bad_durations_say_what_to_write(bad: object) -> None:
    with pytest.raises(ValueError, match="duration"):
        units.parse_duration(bad)  # type: ignore[arg-type]


@given(st.floats(min_value=0.01, max_value=5000, allow_nan=False))
def test_rate_per_minute_is_sixty_per_hour(n: float) -> None:
    per_min = units.parse_rate(f"{n}/min", "C")
    per_hour = units.parse_rate(f"{n * 60}/h", "C")
    assert per_min is not None and per_hour is not None
    assert math.isclose(per_min, per_hour, rel_tol=1e-9)


def test_rates() -> None:
    assert units.parse_rate("max", "F") is None
    assert units.parse_rate("360/h", "C") == pytest.approx(0.1)
    assert units.parse_rate("9/min", "F") == pytest.approx(5 / 60)  # 9 °F = 5 K
    for bad in ("fast", "400", "0/h", "400/day"):
        with pytest.raises(ValueError, match="rate"):
            units.parse_rate(bad, "C")


def test_thickness() -> None:
    assert units.parse_thickness("4 mm") == pytest.approx(0.004)
    # 1 in = 25.4 mm exactly (international yard and pound agreement, 1959).
    assert units.parse_thickness("0.16 in") == pytest.approx(0.16 * 0.0254)
    assert units.parse_thickness("1 in") == pytest.approx(0.0254)
    for bad in ("4", "4 ft", "thick", "0 mm"):
        with pytest.raises(ValueError, match="thickness"):
            units.parse_thickness(bad)


@given(st.floats(min_value=0.1, max_value=500, allow_nan=False))
def test_thickness_mm_and_inches_agree(mm: float) -> None:
    assert math.isclose(units.parse_thickness(f"{mm} mm"),
                        units.parse_thickness(f"{mm / 25.4} in"), rel_tol=1e-9)
