"""drivers.its90 and `tuikiln thermocouple` against NIST ITS-90 (NIST Monograph 175).

Outside references used here:
- NIST Monograph 175 / NIST ITS-90 Thermocouple Database (SRD 60) table values, typed from
  memory (marked below), each also checked against the `thermocouples_reference` package.
- The error NIST states for each inverse polynomial (Monograph 175 / SRD 60 allcoeff.tab;
  kept beside the coefficients in drivers/its90_coefficients.py).
- The `thermocouples_reference` package (PyPI, public domain), whose reference functions
  come from NIST SRD 60: a test-only cross-check; drivers.its90 must not import it.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest
import thermocouples_reference
from hypothesis import given, settings
from hypothesis import strategies as st

from tuikiln import cli
from tuikiln.drivers import its90

REFERENCE = thermocouples_reference.thermocouples

# Values from NIST Monograph 175 / NIST ITS-90 Thermocouple Database tables, from memory
# (°C, mV, reference junction at 0 °C). Each was also checked against thermocouples_reference.
# Type E 500 °C was left out: the value remembered (36.999 mV) disagreed with both the
# reference function and the package (37.005 mV); the tables are computed from that function,
# so the memory was at fault.
NIST_TABLE_MV: dict[str, list[tuple[float, float]]] = {
    "B": [(100, 0.033), (200, 0.178), (300, 0.431), (400, 0.787), (500, 1.242),
          (600, 1.792), (700, 2.431), (800, 3.154), (900, 3.957), (1000, 4.834),
          (1100, 5.780), (1200, 6.786), (1300, 7.848), (1400, 8.956), (1500, 10.099),
          (1600, 11.263), (1700, 12.433), (1800, 13.591), (1820, 13.820)],
    "E": [(-270, -9.835), (-200, -8.825), (-100, -5.237), (0, 0.0), (100, 6.319),
          (200, 13.421), (300, 21.036), (400, 28.946), (600, 45.093), (700, 53.112),
          (800, 61.017), (900, 68.787), (1000, 76.373)],
    "J": [(-210, -8.095), (-200, -7.890), (-100, -4.633), (0, 0.0), (100, 5.269),
          (200, 10.779), (300, 16.327), (400, 21.848), (500, 27.393), (600, 33.102),
          (700, 39.132), (760, 42.919), (800, 45.494), (1000, 57.953), (1200, 69.553)],
    "K": [(-270, -6.458), (-200, -5.891), (-100, -3.554), (0, 0.0), (100, 4.096),
          (200, 8.138), (300, 12.209), (400, 16.397), (500, 20.644), (600, 24.905),
          (700, 29.129), (800, 33.275), (900, 37.326), (1000, 41.276), (1100, 45.119),
          (1200, 48.838), (1300, 52.410), (1372, 54.886)],
    "N": [(-270, -4.345), (-200, -3.990), (-100, -2.407), (0, 0.0), (100, 2.774),
          (200, 5.913), (300, 9.341), (400, 12.974), (500, 16.748), (600, 20.613),
          (700, 24.527), (800, 28.455), (900, 32.371), (1000, 36.256), (1100, 40.087),
          (1200, 43.846), (1300, 47.513)],
    "R": [(-50, -0.226), (0, 0.0), (100, 0.647), (200, 1.469), (300, 2.401), (400, 3.408),
          (500, 4.471), (600, 5.583), (700, 6.743), (800, 7.950), (900, 9.205),
          (1000, 10.506), (1100, 11.850), (1200, 13.228), (1300, 14.629), (1400, 16.040),
          (1500, 17.451), (1600, 18.849), (1700, 20.222), (1768, 21.101)],
    "S": [(-50, -0.236), (0, 0.0), (100, 0.646), (200, 1.441), (300, 2.323), (400, 3.259),
          (500, 4.233), (600, 5.239), (700, 6.275), (800, 7.345), (900, 8.449),
          (1000, 9.587), (1100, 10.757), (1200, 11.951), (1300, 13.159), (1400, 14.373),
          (1500, 15.582), (1600, 16.777), (1700, 17.947), (1768, 18.693)],
    "T": [(-270, -6.258), (-200, -5.603), (-150, -4.648), (-100, -3.379), (-50, -1.819),
          (0, 0.0), (50, 2.036), (100, 4.279), (150, 6.704), (200, 9.288), (300, 14.862),
          (400, 20.872)],
}

# NIST tables print emf to 0.001 mV: a correct function lies within half of that.
TABLE_ROUNDING_MV = 0.0005


def reference_emf(tc_type: str, temperature: np.ndarray) -> np.ndarray:
    """thermocouples_reference's NIST function. Its emf_mVC breaks under numpy 2 (it calls
    np.array(copy=False)); .func takes °C and gives mV (func.Tunits / func.Vunits say so)
    and works when handed an ndarray."""
    func = REFERENCE[tc_type].func
    assert (func.Tunits, func.Vunits) == ("C", "mV")
    return func(np.asarray(temperature, dtype=float))


def stated_error_with_rounding(piece: its90.InversePiece) -> tuple[float, float]:
    """NIST's stated error, widened by half a unit of its last printed digit: NIST rounded
    the figures (type K -200..0 °C says +0.04 °C; a dense grid finds +0.0408 °C)."""
    low, high = piece.error_c
    half_digit = 0.5 * 10.0 ** -max(_decimals(low), _decimals(high))
    return low - half_digit, high + half_digit


def _decimals(value: float) -> int:
    text = repr(abs(value))
    return len(text.split(".")[1]) if "." in text else 0


def stated_error_at(tc_type: str, temperature: float) -> tuple[float, float]:
    """Widened stated error of the piece covering `temperature`, and at a shared end
    the looser of the two pieces (either may be the one chosen there)."""
    lows, highs = [], []
    for piece in its90.inverse_pieces(tc_type):
        if piece.t_min_c - 1e-6 <= temperature <= piece.t_max_c + 1e-6:
            low, high = stated_error_with_rounding(piece)
            lows.append(low)
            highs.append(high)
    return min(lows), max(highs)


# ---- NIST tables -----------------------------------------------------------------------


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_reference_function_matches_nist_table(tc_type: str) -> None:
    rows = NIST_TABLE_MV[tc_type]
    assert len(rows) >= 10
    for temperature, table_mv in rows:
        ours = its90.emf_mv(tc_type, float(temperature))
        package = float(reference_emf(tc_type, np.array([temperature]))[0])
        # NIST Monograph 175 table (from memory), to the table's rounding
        assert abs(ours - table_mv) <= TABLE_ROUNDING_MV + 1e-12, (tc_type, temperature, ours)
        # thermocouples_reference (NIST SRD 60 coefficients)
        assert ours == pytest.approx(package, abs=1e-9)


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_inverse_of_nist_table_values(tc_type: str) -> None:
    for temperature, table_mv in NIST_TABLE_MV[tc_type]:
        low_c, high_c = its90.inverse_temperature_range_c(tc_type)
        if not low_c <= temperature <= high_c:
            continue
        got = its90.temperature_c(tc_type, table_mv)
        # The table's 0.0005 mV rounding is worth 0.0005 / Seebeck coefficient in °C.
        seebeck = (its90.emf_mv(tc_type, min(temperature + 0.5, high_c))
                   - its90.emf_mv(tc_type, max(temperature - 0.5, low_c)))
        slack = TABLE_ROUNDING_MV / seebeck
        low, high = stated_error_at(tc_type, temperature)  # NIST-stated inverse error
        assert low - slack <= got - temperature <= high + slack, (tc_type, temperature, got)


def test_type_k_worked_values_from_the_brief() -> None:
    # NIST Monograph 175 type K table, from memory: 1000 °C = 41.276 mV
    assert its90.emf_mv("K", 1000.0) == pytest.approx(41.276, abs=TABLE_ROUNDING_MV)
    # inverse within NIST's stated -0.05..+0.06 °C for 500..1372 °C
    assert -0.05 - 0.0005 / 0.039 <= its90.temperature_c("K", 41.276) - 1000.0 <= 0.06
    # the type K exponential term matters: without it 127 °C would be ~0.12 mV off
    exponential = its90.FORWARD["K"][1].exponential
    assert exponential is not None and exponential[0] == pytest.approx(0.1185976)
    # NIST type K 127 °C table value, from memory: 5.206 mV
    assert its90.emf_mv("K", 127.0) == pytest.approx(5.206, abs=TABLE_ROUNDING_MV)


# ---- the inverse polynomials against NIST's stated errors ------------------------------


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_inverse_within_nist_stated_error_on_a_dense_grid(tc_type: str) -> None:
    for piece in its90.inverse_pieces(tc_type):
        temperatures = np.linspace(piece.t_min_c, piece.t_max_c, 4001)
        # emf from the package's reference function, so both directions are checked at once
        emf = reference_emf(tc_type, temperatures)
        error = its90.temperature_c(tc_type, emf) - temperatures
        low, high = stated_error_with_rounding(piece)  # NIST Monograph 175 stated error
        inside = error[1:-1]
        assert low <= inside.min() and inside.max() <= high, (tc_type, piece.t_min_c,
                                                              inside.min(), inside.max())
        # a shared end belongs to one of the two pieces: either's error may apply there
        for end, end_error in ((temperatures[0], error[0]), (temperatures[-1], error[-1])):
            end_low, end_high = stated_error_at(tc_type, end)
            assert end_low <= end_error <= end_high, (tc_type, end, end_error)


def test_stated_errors_are_nist_s_for_type_k() -> None:
    # NIST Monograph 175, type K inverse: -0.02..0.04, -0.05..0.04, -0.05..0.06 °C
    assert [p.error_c for p in its90.inverse_pieces("K")] == [
        (-0.02, 0.04), (-0.05, 0.04), (-0.05, 0.06)]


# ---- cross-check with thermocouples_reference over thousands of points ----------------


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_reference_function_agrees_with_thermocouples_reference(tc_type: str) -> None:
    low, high = its90.temperature_range_c(tc_type)
    assert (low, high) == (REFERENCE[tc_type].func.minT, REFERENCE[tc_type].func.maxT)
    temperatures = np.linspace(low, high, 5000)
    ours = its90.emf_mv(tc_type, temperatures)
    assert isinstance(ours, np.ndarray) and ours.shape == temperatures.shape
    np.testing.assert_allclose(ours, reference_emf(tc_type, temperatures), rtol=0, atol=1e-9)


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_scalar_and_vector_paths_agree(tc_type: str) -> None:
    low, high = its90.inverse_temperature_range_c(tc_type)
    temperatures = np.linspace(low, high, 97)
    vector = its90.emf_mv(tc_type, temperatures)
    scalar = [its90.emf_mv(tc_type, float(t)) for t in temperatures]
    np.testing.assert_allclose(vector, scalar, rtol=0, atol=1e-12)
    back_vector = its90.temperature_c(tc_type, vector)
    back_scalar = [its90.temperature_c(tc_type, float(e)) for e in vector]
    np.testing.assert_allclose(back_vector, back_scalar, rtol=0, atol=1e-9)
    grid = its90.emf_mv(tc_type, temperatures.reshape(97, 1))
    assert grid.shape == (97, 1)


# ---- hypothesis properties ---------------------------------------------------------------


@st.composite
def type_and_inverse_temperature(draw: st.DrawFn) -> tuple[str, float]:
    tc_type = draw(st.sampled_from(its90.TYPES))
    low, high = its90.inverse_temperature_range_c(tc_type)
    return tc_type, draw(st.floats(low, high, allow_nan=False))


@settings(max_examples=300, deadline=None)
@given(type_and_inverse_temperature())
def test_round_trip_within_stated_error(case: tuple[str, float]) -> None:
    tc_type, temperature = case
    back = its90.temperature_c(tc_type, its90.emf_mv(tc_type, temperature))
    low, high = stated_error_at(tc_type, temperature)  # NIST Monograph 175 stated error
    assert low <= back - temperature <= high


@settings(max_examples=300, deadline=None)
@given(type_and_inverse_temperature(), st.floats(-20.0, 60.0))
def test_cold_junction_compensation_is_consistent(
    case: tuple[str, float], room: float
) -> None:
    tc_type, temperature = case
    cold = max(room, its90.temperature_range_c(tc_type)[0])  # type B starts at 0 °C
    measured = its90.emf_mv(tc_type, temperature, cold_junction_c=cold)
    # emf relative to the cold junction is the difference of reference-function values
    assert measured == pytest.approx(
        its90.emf_mv(tc_type, temperature) - its90.emf_mv(tc_type, cold), abs=1e-12)
    # compensation adds the cold junction's emf back before inverting
    back = its90.temperature_c(tc_type, measured, cold_junction_c=cold)
    assert back == pytest.approx(
        its90.temperature_c(tc_type, measured + its90.emf_mv(tc_type, cold)), abs=1e-9)
    low, high = stated_error_at(tc_type, temperature)
    assert low - 1e-9 <= back - temperature <= high + 1e-9


def test_cold_junction_example() -> None:
    # Type K, junction at 1000 °C, meter at 25 °C: it reads 41.276 - 1.000 = 40.276 mV
    # (NIST type K table values 1000 °C and 25 °C, from memory).
    reading = its90.emf_mv("K", 1000.0, cold_junction_c=25.0)
    assert reading == pytest.approx(40.276, abs=2 * TABLE_ROUNDING_MV)
    assert its90.temperature_c("K", reading, cold_junction_c=25.0) == pytest.approx(1000, abs=0.06)
    # Forgetting the compensation would read about 25 °C low: the reason it exists.
    assert 24.0 < 1000.0 - its90.temperature_c("K", reading) < 27.0


# ---- ranges and errors ---------------------------------------------------------------


def test_out_of_range_messages_name_the_range() -> None:
    with pytest.raises(its90.OutOfRange) as raised:
        its90.emf_mv("K", 1400.0)
    assert str(raised.value) == (
        "type K covers -270 to 1372 °C (-6.458 to 54.886 mV); 1400 °C is outside it")
    with pytest.raises(its90.OutOfRange) as raised:
        its90.temperature_c("K", 60.0)
    assert "-200 to 1372 °C (-5.891 to 54.886 mV)" in str(raised.value)
    assert "60 mV is outside it" in str(raised.value)
    # the inverse starts later than the reference function for K (-200 vs -270 °C)
    with pytest.raises(its90.OutOfRange, match="starts at -200 °C, not -270 °C"):
        its90.temperature_c("K", -6.2)
    assert its90.emf_mv("K", -250.0) < -5.891  # the forward still covers it


def test_cold_junction_total_must_be_inside_the_inverse_range() -> None:
    assert its90.emf_mv("K", its90.temperature_c("K", 54.5)) == pytest.approx(54.5, abs=0.003)
    with pytest.raises(its90.OutOfRange, match=r"cold junction at 25 °C.*makes 55\.5"):
        its90.temperature_c("K", 54.5, cold_junction_c=25.0)
    with pytest.raises(its90.OutOfRange, match="cold junction at 1500 °C is outside"):
        its90.temperature_c("K", 1.0, cold_junction_c=1500.0)


def test_table_end_values_are_accepted_despite_rounding() -> None:
    # NIST table ends (from memory): K -200 °C = -5.891 mV (the function gives -5.8914);
    # at -200 °C type K gives only ~5.5 µV/°C, so the 0.4 µV of rounding is ~0.07 °C.
    assert its90.temperature_c("K", -5.891) == pytest.approx(-200, abs=0.1)
    assert its90.temperature_c("S", -0.236) == pytest.approx(-50, abs=0.1)
    with pytest.raises(its90.OutOfRange):
        its90.temperature_c("K", -5.893)


def test_arrays_with_bad_values_and_unknown_types() -> None:
    with pytest.raises(its90.OutOfRange, match=r"2000 °C \(and 1 more value\)"):
        its90.emf_mv("K", np.array([1.0, 2000.0, 3000.0]))
    with pytest.raises(its90.OutOfRange, match="not a number"):
        its90.temperature_c("J", np.array([1.0, math.nan]))
    with pytest.raises(its90.UnknownType, match="B, E, J, K, N, R, S, T"):
        its90.emf_mv("X", 100.0)
    assert its90.normal_type(" type k ") == "K"


def test_drivers_its90_imports_neither_tuikiln_nor_the_reference_package() -> None:
    code = (
        "import sys, tuikiln.drivers.its90\n"
        # The tuikiln package itself is only the namespace the drivers install in.
        "bad = [m for m in sys.modules if m.startswith('thermocouples_reference')\n"
        "       or (m.startswith('tuikiln.') and not m.startswith('tuikiln.drivers'))]\n"
        "assert not bad, bad\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True, capture_output=True)


# ---- the command ---------------------------------------------------------------------


@pytest.fixture
def tuikiln_main(monkeypatch: pytest.MonkeyPatch):
    """cli.main with only this command registered: other commands' modules are not this
    file's business (and may pull in Textual); the registration line itself is checked."""
    assert cli.COMMANDS["thermocouple"] == "tuikiln.commands.thermocouple"
    monkeypatch.setattr(cli, "COMMANDS", {"thermocouple": cli.COMMANDS["thermocouple"]})
    return cli.main


def test_command_millivolts_to_temperature(tuikiln_main, capsys) -> None:
    assert tuikiln_main(["thermocouple", "K", "41.276mV"]) == 0
    assert capsys.readouterr().out.strip() == (
        "type K: 41.276 mV -> 1000.0 °C (1832.0 °F), cold junction 0.0 °C")
    assert tuikiln_main(["thermocouple", "k", "41.276 MV"]) == 0
    assert "1000.0 °C" in capsys.readouterr().out


def test_command_temperature_to_millivolts_with_cold_junction(tuikiln_main, capsys) -> None:
    assert tuikiln_main(["thermocouple", "K", "1832F", "--cold", "77F", "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert {"type", "temperature_c", "emf_mv", "temperature_f", "cold_junction_c"} <= set(result)
    assert result["type"] == "K"
    assert result["temperature_c"] == pytest.approx(1000.0)
    assert result["cold_junction_c"] == pytest.approx(25.0)
    # NIST type K table, from memory: 41.276 - 1.000 mV
    assert result["emf_mv"] == pytest.approx(40.276, abs=0.001)


def test_command_negative_values_are_values_not_options(tuikiln_main, capsys) -> None:
    assert tuikiln_main(["thermocouple", "K", "-100C", "--cold", "-10C"]) == 0
    out = capsys.readouterr().out
    # NIST type K table, from memory: -100 °C = -3.554 mV, -10 °C = -0.392 mV
    assert "-> -3.162 mV" in out and "cold junction -10.0 °C" in out
    assert tuikiln_main(["thermocouple", "K", "-3.554mV", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["temperature_c"] == pytest.approx(-100, abs=0.05)


@pytest.mark.parametrize(
    ("argv", "words"),
    [
        (["K", "60mV"], "-200 to 1372 °C (-5.891 to 54.886 mV)"),
        (["K", "1500C"], "type K covers -270 to 1372 °C"),
        (["K", "54.5mV", "--cold", "25"], "cold junction at 25 °C"),
        (["X", "100C"], "use one of B, E, J, K, N, R, S, T"),
        (["K", "41.2"], 'write "41.2mV" for a reading'),
        (["K", "hot"], 'such as "41.276mV"'),
        (["K", "1mV", "--cold", "warm"], '--cold "warm" is not a temperature'),
    ],
)
def test_command_errors_are_one_plain_line(tuikiln_main, capsys, argv, words) -> None:
    assert tuikiln_main(["thermocouple", *argv]) == 1
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and words in lines[0], captured.err
    assert "Traceback" not in captured.err
