"""The simulator's settings: defaults, plain-words problems, and no exceptions on bad input."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from collections.abc import Callable
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tuikiln.simulator import SimConfig, check_sim_settings, parse_duration

REPO = Path(__file__).resolve().parents[1]


def test_empty_device_table_gives_the_defaults() -> None:
    config, problems = check_sim_settings({"device": {"kind": "sim"}})
    assert problems == [] and config == SimConfig()


def test_full_file_is_read_in_si_units() -> None:
    text = """
    [device]
    kind = "sim"
    speed = "max"
    seed = 7
    room = 15
    heater_w = 2000
    [device.load]
    thickness_mm = 12
    material = "stainless"
    thermocouple = false
    [device.noise]
    chamber_c = 0.5
    resolution_c = 1
    [[device.fault]]
    at = "1h30m"
    kind = "tc-drift"
    for = "30m"
    rate_c_per_h = 20
    """
    config, problems = check_sim_settings(tomllib.loads(text))
    assert problems == []
    assert config is not None
    assert config.speed is None and config.seed == 7 and config.room_c == 15.0
    assert config.oven.heater_w == 2000.0
    assert config.load is not None and config.load.thickness_m == 0.012
    assert config.load.material == "stainless" and config.load.conductivity_w_mk == 22.0
    assert not config.load_thermocouple
    assert config.noise_c == 0.5 and config.resolution_c == 1.0
    (fault,) = config.faults
    assert (fault.kind, fault.at_s, fault.for_s, fault.rate_c_per_h) == (
        "tc-drift", 5400.0, 1800.0, 20.0)


def test_problems_name_the_key_and_suggest_a_spelling() -> None:
    table = {
        "device": {
            "kind": "sim",
            "heatr_w": 1500,
            "room": "warm",
            "load": {"thickness_mm": -3, "material": "tool steal"},
            "fault": [{"at": "15m", "kind": "door"}, {"kind": "tc-open", "at": "soon"}],
        }
    }
    config, problems = check_sim_settings(table)
    assert config is None
    found = dict(problems)
    assert found[("device", "fault", 0, "kind")] == (
        'unknown fault kind "door" (did you mean "door-open"?)')
    assert 'did you mean "heater_w"' in found[("device", "heatr_w")]
    assert "number" in found[("device", "room")]
    assert "from 0.01" in found[("device", "load", "thickness_mm")]
    assert 'did you mean "tool steel"' in found[("device", "load", "material")]
    assert "duration" in found[("device", "fault", 1, "at")]


def test_durations() -> None:
    assert parse_duration("1h30m") == 5400.0
    assert parse_duration("90s") == 90.0
    assert parse_duration("15m") == 900.0
    assert parse_duration(12) == 12.0


_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner,
                                                                 max_size=3),
    max_leaves=8,
)
_keys = st.sampled_from(["kind", "speed", "heater_w", "load", "noise", "fault", "room", "seed",
                         "at", "for", "thickness_mm", "layers", "x"])


@settings(max_examples=60, deadline=None)
@given(st.dictionaries(_keys, _values | st.dictionaries(_keys, _values, max_size=4), max_size=6))
def test_never_raises_on_any_table(device: dict) -> None:
    config, problems = check_sim_settings({"device": device})
    assert (config is None) == bool(problems)
    assert all(isinstance(message, str) and message for _, message in problems)


def test_serve_reports_file_and_line_without_traceback(kiln_file: Callable[..., Path]) -> None:
    kiln = kiln_file('name = "x"\n[device]\nkind = "sim"\n\n[[device.fault]]\nat = "15m"\n'
                     'kind = "door"\n')
    done = subprocess.run(
        [sys.executable, "-m", "tuikiln.simulator.serve", "--config", str(kiln)],
        cwd=REPO, capture_output=True, text=True, timeout=20,
    )
    assert done.returncode == 2
    assert f'{kiln}:7: unknown fault kind "door" (did you mean "door-open"?)' in done.stderr
    assert "Traceback" not in done.stderr


def test_documented_settings_are_the_defaults() -> None:
    # The module docstring is what the README shows: its example must equal the defaults.
    import tuikiln.simulator.config

    doc = tuikiln.simulator.config.__doc__ or ""
    block = doc.split("```toml", 1)[1].split("```", 1)[0]
    table = tomllib.loads(block)
    del table["device"]["fault"]
    config, problems = check_sim_settings(table)
    assert problems == []
    assert config == SimConfig()


def test_serve_options_change_the_settings(kiln_file: Callable[..., Path]) -> None:
    from tuikiln.simulator.serve import build_parser, load_config

    kiln = kiln_file('[device]\nkind = "sim"\nheater_w = 1500\n[device.noise]\nchamber_c = 0\n')
    args = build_parser().parse_args(
        ["--config", str(kiln), "--speed", "max", "--seed", "4", "--load-thickness", "12",
         "--no-load-tc", "--fault", "door-open@20m+45s", "--fault", "tc-open@1h"])
    config = load_config(args)
    assert config.oven.heater_w == 1500.0 and config.noise_c == 0.0
    assert config.speed is None and config.seed == 4
    assert config.load is not None and config.load.thickness_m == 0.012
    assert not config.load_thermocouple
    assert [(f.kind, f.at_s, f.for_s) for f in config.faults] == [
        ("door-open", 1200.0, 45.0), ("tc-open", 3600.0, None)]
    empty = load_config(build_parser().parse_args(["--no-load"]))
    assert empty.load is None


def test_layout_names_are_the_served_layouts() -> None:
    from tuikiln.simulator.config import LAYOUT_NAMES
    from tuikiln.simulator.layouts import LAYOUTS

    assert LAYOUT_NAMES == tuple(LAYOUTS)


def test_layout_key_is_checked_and_kept() -> None:
    config, problems = check_sim_settings({"device": {"layout": "fahrenheit-float"}})
    assert problems == [] and config is not None and config.layout == "fahrenheit-float"
    assert check_sim_settings({"device": {}})[0].layout == "sim"  # type: ignore[union-attr]
    _, problems = check_sim_settings({"device": {"layout": "whole-degree"}})
    assert problems == [(("device", "layout"),
                         'unknown layout "whole-degree" (did you mean "whole-degree-coil"?)')]
    _, problems = check_sim_settings({"device": {"layout": 3}})
    assert problems and "layout must be text" in problems[0][1]


def test_a_bad_layout_in_the_kiln_file_is_one_line_with_its_line(
        kiln_file: Callable[..., Path]) -> None:
    """Both readers of a sim kiln file: `sim serve --config` and `tuikiln check`-style
    loading through the kiln file (tuikiln.kiln)."""
    from tuikiln.errors import FileProblems
    from tuikiln.kiln import load_kiln

    kiln = kiln_file('name = "x"\n[device]\nkind = "sim"\nlayout = "farenheit-float"\n')
    done = subprocess.run(
        [sys.executable, "-m", "tuikiln.simulator.serve", "--config", str(kiln)],
        cwd=REPO, capture_output=True, text=True, timeout=20,
    )
    assert done.returncode == 2 and "Traceback" not in done.stderr
    assert (f'{kiln}:4: unknown layout "farenheit-float" (did you mean "fahrenheit-float"?)'
            in done.stderr)
    with pytest.raises(FileProblems) as caught:
        load_kiln(kiln)
    assert f"{kiln.name}:4:" in str(caught.value) and "fahrenheit-float" in str(caught.value)


def test_serve_reads_the_layout_from_the_kiln_file(kiln_file: Callable[..., Path]) -> None:
    from tuikiln.simulator.serve import build_parser, load_config

    kiln = kiln_file('[device]\nkind = "sim"\nlayout = "whole-degree-coil"\n')
    assert load_config(build_parser().parse_args(["--config", str(kiln)])).layout == (
        "whole-degree-coil")  # the override on the wire: tests/test_sim_serve.py
