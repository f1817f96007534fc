"""Register map files: decoding rules, block planning, and errors named by file:line:key."""

from __future__ import annotations

import struct

import pytest

from tuikiln.drivers.maps import MapError, load_map, parse_map, plan_blocks, shipped_maps

SIM_DRAFT = """
name = "tuikiln simulator"
[read]
chamber = { fc = 3, address = 0, scale = 0.1, signed = true, units = "C", open = [32767] }
setpoint = { fc = 3, address = 1, scale = 0.1, signed = true, units = "C" }
output = { fc = 3, address = 2, scale = 0.1 }
status = { fc = 3, address = 3, bits = { sensor_fault = 0, running = 1 } }
load = { fc = 3, address = 5, scale = 0.1, signed = true, units = "C", open = [32767] }
[write]
setpoint = { fc = 6, address = 1, scale = 0.1, signed = true, units = "C" }
run = { fc = 6, address = 4, on = 1, off = 0 }
"""


def test_sim_draft_and_shipped_maps_load() -> None:
    sim = parse_map(SIM_DRAFT, "sim.toml")
    assert set(sim.reads) == {"chamber", "setpoint", "output", "status", "load"}
    # 0-3 contiguous, 5 apart: two requests with max_gap 0, one with max_gap 1
    assert [(b.address, b.count) for b in sim.blocks()] == [(0, 4), (5, 1)]
    assert [(b.address, b.count) for b in plan_blocks(sim.all_reads, 1)] == [(0, 6)]
    for name in shipped_maps():
        load_map(name)
    generic = load_map("generic-pid")
    assert generic.safe_setpoint_c == 0.0 and "run" in generic.writes


def test_blocks_split_by_function_code_and_the_125_register_limit() -> None:
    text = """
[read]
chamber = { fc = 3, address = 0, units = "C" }
load = { fc = 4, address = 1, units = "C" }
setpoint = { fc = 3, address = 124, type = "float32", units = "C" }
"""
    blocks = plan_blocks(parse_map(text).all_reads, max_gap=200)
    # Modbus Application Protocol V1.1b3 s.6.3: at most 125 registers per read request
    assert [(b.fc, b.address, b.count) for b in blocks] == [(3, 0, 1), (3, 124, 2), (4, 1, 1)]


def test_decoding_rules() -> None:
    m = parse_map("""
[read]
chamber = { fc = 3, address = 0, decimals = 1, signed = true, units = "F" }
load = { fc = 3, address = 1, type = "int32", word_order = "little", units = "C", scale = 0.01 }
setpoint = { fc = 3, address = 3, type = "float32", units = "C" }
""")
    chamber, load, setpoint = m.reads["chamber"], m.reads["load"], m.reads["setpoint"]
    # -40 °F = -40 °C (the one temperature both scales share; definition of °F)
    assert chamber.value(chamber.decode_raw([(-400) & 0xFFFF])) == pytest.approx(-40.0)
    words = load.encode(-123.45)
    assert load.value(load.decode_raw(words)) == pytest.approx(-123.45)
    assert words == list(reversed(struct.unpack(">HH", struct.pack(">i", -12345))))
    # IEEE 754 single: 850.0 = 0x44548000 (big word order: 0x4454, 0x8000)
    assert setpoint.encode(850.0) == [0x4454, 0x8000]
    assert chamber.resolution_c == pytest.approx(0.1 * 5 / 9)


def _problems(text: str) -> list[str]:
    with pytest.raises(MapError) as caught:
        parse_map(text, "/somewhere/mine.toml")
    return caught.value.problems


def test_errors_name_file_line_and_key() -> None:
    problems = _problems("""name = "bad"
[read]
chamber = { fc = 5, address = 0, units = "C" }
load = { fc = 3, units = "C" }
setpoint = { fc = 3, address = 1, unit = "C" }
laod = { fc = 3, address = 9, units = "C" }
[write]
setpoint = { fc = 6, address = 1, type = "float32", units = "C" }
""")
    text = "\n".join(problems)
    assert "mine.toml:3: [read.chamber] fc: function code must be 1 (coils)" in text
    assert "mine.toml:4: [read.load] address: missing" in text
    assert 'mine.toml:5: [read.setpoint] unit: unknown key (did you mean "units"?)' in text
    assert 'mine.toml:6: [read] laod: unknown quantity (did you mean "load"?)' in text
    assert "mine.toml:8: [write.setpoint] fc: a float32 spans two registers" in text


def test_toml_syntax_error_names_the_line() -> None:
    problems = _problems('[read]\nchamber = { fc = 3, address = }\n')
    assert problems[0].startswith("mine.toml:2: not valid TOML")


def test_missing_map_lists_the_shipped_ones(tmp_path) -> None:
    with pytest.raises(MapError) as caught:
        load_map("no-such-map")
    assert "generic-pid" in str(caught.value)
    path = tmp_path / "mine.toml"
    path.write_text(SIM_DRAFT)
    assert load_map("mine.toml", tmp_path).name == "tuikiln simulator"
