"""Settings of the built-in software oven, and the check of a kiln file's `[device]` table.

The kiln file says `kind = "sim"` in `[device]`; every other key has a default, so an empty
table gives an invented bench-top heat-treat oven (1.8 kW, about 4.5 litres: empty it reaches
1000 °C in about an hour and cannot get much above 1150 °C) holding one steel plate
6 x 50 x 150 mm with a thermocouple on its surface.

```toml
[device]
kind = "sim"
speed = 1                 # time multiple: 1 = real time, 60 = a minute per second, "max"
seed = 0                  # seed of the noise generator (same seed, same run)
room = 20                 # room temperature, °C
heater_w = 1800           # power of the heating elements when on, W
chamber_litres = 4.5      # inside volume of the chamber, litres (treated as a cube)
chamber_heat_capacity = 2000  # hearth, elements, air and the inner skin of the lining, J/K
wall_thickness_mm = 90    # insulating lining (firebrick or fibre board), mm
wall_conductivity = 0.15  # of the lining, W/(m·K)
wall_density = 500        # of the lining, kg/m³
wall_specific_heat = 1000 # of the lining, J/(kg·K)
wall_layers = 5           # nodes across the lining (2 or more)
leak_area_cm2 = 50        # gaps round door, vent and thermocouple port, radiating to the room, cm²
casing_h = 10             # convection from the outer casing to the room, W/(m²·K)
casing_emissivity = 0.8   # of the outer casing (radiation to the room), 0..1
door_area_cm2 = 0         # opening uncovered when the door opens, cm² (0: one face of the cube)
control = "ssr"           # "ssr" (time-proportioned on/off) or "proportional" (phase angle)
cycle_s = 2               # time-proportioning cycle of the "ssr" output, s
kp = 4                    # proportional gain, % output per °C of error
ti_s = 240                # integral time, s (0: no integral action)
td_s = 20                 # derivative time, s (0: no derivative action)
output_max_pct = 100      # output limit, %
setpoint_max = 1250       # highest setpoint the controller accepts, °C
chamber_tc_lag_s = 8      # time constant of the chamber thermocouple, s
keep_settings = false     # true: setpoint and run state survive a power cycle
power_on_setpoint = 0     # setpoint after a power cycle when settings are not kept, °C
run_at_power_on = false   # running after a power cycle when settings are not kept
baud = 9600               # wire time emulated by `sim serve` (8N1, 10 bits per byte)
address = 1               # Modbus device address answered by `sim serve`
layout = "sim"            # where `sim serve` keeps its values: "sim", "whole-degree-coil",
                          # "fahrenheit-float" (simulator/layouts.py; `--layout` overrides);
                          # the in-process simulator of `tuikiln run` has no registers

[device.load]             # leave out `[device.load]` and set `load = false` for an empty oven
thickness_mm = 6          # plate thickness, mm (heated from both faces)
width_mm = 50             # mm
length_mm = 150           # mm
material = "carbon steel" # "carbon steel", "tool steel", "stainless" (sets the three below)
density = 7850            # kg/m³ (overrides the material's)
specific_heat = 600       # J/(kg·K) (overrides the material's)
conductivity = 40         # W/(m·K) (overrides the material's)
emissivity = 0.8          # of the plate surface (oxidised steel), 0..1 (0: no radiation)
h_w_m2k = 10              # convection from chamber air to the plate, W/(m²·K)
layers = 4                # nodes across the half-thickness (1: one lumped lump)
thermocouple = true       # a thermocouple tied to the plate surface (register 5)
tc_lag_s = 4              # time constant of that thermocouple, s
wrap = "none"             # "none" or "foil": the plate sealed in a stainless foil packet
foil_emissivity = 0.3     # foil only: emissivity of the foil, 0..1
foil_gap_mm = 1           # foil only: mean air gap between the foil and the plate, mm

[device.noise]
chamber_c = 0.3           # standard deviation of the chamber reading's noise, °C
load_c = 0.3              # standard deviation of the load reading's noise, °C
resolution_c = 0.1        # display resolution of both readings, °C (0: none)

[[device.fault]]          # any number; `at` and `for` are durations from the start
at = "1h30m"              # "90s", "15m", "1h30m" or seconds as a number
kind = "tc-drift"         # see below
for = "30m"               # how long it lasts (left out: to the end; door-open 30 s)
rate_c_per_h = -30        # tc-drift only: reading error growth, °C per hour (negative reads low)
share = 0.5               # line-noise only: fraction of replies garbled, 0..1
```

Fault kinds: "element-open" (no heat), "relay-welded" (full heat whatever the output),
"tc-open" (chamber thermocouple open: reads over-range, sensor-fault flag, output off),
"tc-drift" (chamber reading off by a growing amount), "door-open" (sudden loss while open),
"link-drop" (the serial line stays silent), "line-noise" (garbled replies),
"controller-reboot" (silent and heater off for `for`, default 3 s; then the setpoint and run
state come back per `keep_settings`).

A foil wrap (stainless tool-wrap foil, 0.05 mm, the packet air-hardening steels are hardened
in) puts a thin skin of low emissivity round the plate and an air gap between skin and plate:
the chamber heats the foil by radiation and convection, the foil heats the plate across the
gap by conduction through the still air and radiation between the two faces. The default
foil emissivity 0.3 (bright stainless 0.1-0.2, dulled by use towards 0.5) and gap 1 mm (a
packet folded snug by hand, not pressed flat) are from memory, not measured; the air's
conductivity is a power-law fit to Incropera App. A Table A.4 (from memory).

Material values are means over 20-900 °C, from memory of handbook tables (Incropera,
Fundamentals of Heat and Mass Transfer, App. A, and makers' data sheets): good enough for
an invented oven, not for engineering.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

WRAPS = ("none", "foil")
# The register layouts `sim serve` can present: simulator/layouts.py's LAYOUTS, by name
# (named here because layouts imports the kiln, which imports this; a test holds them equal).
LAYOUT_NAMES = ("sim", "whole-degree-coil", "fahrenheit-float")

FAULT_KINDS = (
    "element-open",
    "relay-welded",
    "tc-open",
    "tc-drift",
    "door-open",
    "link-drop",
    "line-noise",
    "controller-reboot",
)

# (density kg/m³, specific heat J/(kg·K), conductivity W/(m·K)): means over 20-900 °C,
# from memory (Incropera App. A tables and makers' data sheets); see the module docstring.
MATERIALS: dict[str, tuple[float, float, float]] = {
    "carbon steel": (7850.0, 600.0, 40.0),
    "tool steel": (7800.0, 560.0, 28.0),
    "stainless": (7900.0, 550.0, 22.0),
}

Problems = list[tuple[tuple[str | int, ...], str]]


@dataclass(frozen=True)
class LoadConfig:
    """A steel plate heated from both faces (SI units)."""

    thickness_m: float = 0.006
    width_m: float = 0.05
    length_m: float = 0.15
    material: str = "carbon steel"
    density_kg_m3: float = 7850.0
    specific_heat_j_kgk: float = 600.0
    conductivity_w_mk: float = 40.0
    emissivity: float = 0.8
    h_w_m2k: float = 10.0
    layers: int = 4
    tc_lag_s: float = 4.0
    wrap: str = "none"
    """ "none", or "foil": a stainless foil skin round the plate with an air gap inside."""
    foil_emissivity: float = 0.3
    foil_gap_m: float = 0.001

    @classmethod
    def of_material(cls, material: str, **overrides: Any) -> LoadConfig:
        rho, cp, k = MATERIALS[material]
        base = cls(material=material, density_kg_m3=rho, specific_heat_j_kgk=cp,
                   conductivity_w_mk=k)
        return replace(base, **overrides)


@dataclass(frozen=True)
class OvenConfig:
    """The oven and its controller (SI units; temperatures °C)."""

    heater_w: float = 1800.0
    chamber_litres: float = 4.5
    chamber_heat_capacity_j_k: float = 2000.0
    wall_thickness_m: float = 0.09
    wall_conductivity_w_mk: float = 0.15
    wall_density_kg_m3: float = 500.0
    wall_specific_heat_j_kgk: float = 1000.0
    wall_layers: int = 5
    leak_area_m2: float = 0.005
    casing_h_w_m2k: float = 10.0
    casing_emissivity: float = 0.8
    door_area_m2: float = 0.0
    control: str = "ssr"
    cycle_s: float = 2.0
    kp: float = 4.0
    ti_s: float = 240.0
    td_s: float = 20.0
    output_max_pct: float = 100.0
    setpoint_max_c: float = 1250.0
    chamber_tc_lag_s: float = 8.0
    keep_settings: bool = False
    power_on_setpoint_c: float = 0.0
    run_at_power_on: bool = False


@dataclass(frozen=True)
class Fault:
    """One scheduled fault: `kind` starts `at_s` seconds from the start, lasts `for_s`."""

    kind: str
    at_s: float
    for_s: float | None = None
    rate_c_per_h: float = -30.0
    share: float = 0.5

    def duration_s(self) -> float:
        """How long it lasts; `inf` for "to the end"."""
        if self.for_s is not None:
            return self.for_s
        if self.kind == "door-open":
            return 30.0
        if self.kind == "controller-reboot":
            return 3.0
        return math.inf


@dataclass(frozen=True)
class SimConfig:
    """Everything the simulated oven needs. `SimConfig()` is the default oven with its plate."""

    oven: OvenConfig = field(default_factory=OvenConfig)
    load: LoadConfig | None = field(default_factory=LoadConfig)
    load_thermocouple: bool = True
    room_c: float = 20.0
    noise_c: float = 0.3
    load_noise_c: float = 0.3
    resolution_c: float = 0.1
    faults: tuple[Fault, ...] = ()
    seed: int = 0
    speed: float | None = 1.0
    """Time multiple for serving; None means as fast as possible."""
    baud: int = 9600
    address: int = 1
    layout: str = "sim"
    """The register layout `sim serve` presents (LAYOUT_NAMES)."""


_DURATION = re.compile(r"^(?:(\d+(?:\.\d+)?)h)?(?:(\d+(?:\.\d+)?)m)?(?:(\d+(?:\.\d+)?)s)?$")


def parse_duration(value: object) -> float:
    """Seconds in "90s", "15m", "1h30m", or a plain number of seconds; ValueError otherwise."""
    if isinstance(value, bool):
        raise ValueError("a duration such as \"15m\", \"1h30m\" or \"90s\"")
    if isinstance(value, int | float):
        if value < 0 or not math.isfinite(value):
            raise ValueError("a duration of zero or more seconds")
        return float(value)
    if isinstance(value, str):
        text = value.strip().replace(" ", "")
        match = _DURATION.match(text)
        if text and match and any(match.groups()):
            h, m, s = (float(g) if g else 0.0 for g in match.groups())
            return h * 3600.0 + m * 60.0 + s
    raise ValueError("a duration such as \"15m\", \"1h30m\" or \"90s\"")


def parse_fault(text: str) -> Fault:
    """A fault from the command line: KIND@AT[+FOR], e.g. "door-open@20m+45s"."""
    kind, sep, when = text.partition("@")
    kind = kind.strip()
    if not sep:
        raise ValueError(f'"{text}": write a fault as KIND@AT[+FOR], e.g. "door-open@20m+45s"')
    if kind not in FAULT_KINDS:
        raise ValueError(f'"{text}": {_unknown("fault kind", kind, FAULT_KINDS)}')
    at_text, plus, for_text = when.partition("+")
    try:
        at_s = parse_duration(_number_or_text(at_text))
        for_s = parse_duration(_number_or_text(for_text)) if plus else None
    except ValueError as exc:
        raise ValueError(f'"{text}": the time needs {exc}') from None
    return Fault(kind=kind, at_s=at_s, for_s=for_s)


def _number_or_text(text: str) -> object:
    try:
        return float(text)
    except ValueError:
        return text


def suggest(word: str, choices: tuple[str, ...] | list[str], cutoff: float = 0.5) -> str:
    """' (did you mean "door-open"?)' or ''. The simulator imports nothing of ours, so it
    keeps this copy of tuikiln.drivers.checking.suggest (looser: its words are longer)."""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=cutoff)
    return f' (did you mean "{close[0]}"?)' if close else ""


def _unknown(what: str, name: str, choices: tuple[str, ...] | list[str]) -> str:
    hint = suggest(name, choices) or (
        " (choose one of " + ", ".join(f'"{c}"' for c in choices) + ")")
    return f'unknown {what} "{name}"{hint}'


# TOML key -> (OvenConfig field, factor to SI, kind) for [device]. kind: "num", "int",
# "bool", "choice"; numbers may also need a range (lo, hi) checked below.
_OVEN_KEYS: dict[str, tuple[str, float, str, tuple[float, float]]] = {
    "heater_w": ("heater_w", 1.0, "num", (0.0, 1e6)),
    "chamber_litres": ("chamber_litres", 1.0, "num", (0.01, 10000.0)),
    "chamber_heat_capacity": ("chamber_heat_capacity_j_k", 1.0, "num", (1.0, 1e8)),
    "wall_thickness_mm": ("wall_thickness_m", 1e-3, "num", (1.0, 1000.0)),
    "wall_conductivity": ("wall_conductivity_w_mk", 1.0, "num", (0.001, 100.0)),
    "wall_density": ("wall_density_kg_m3", 1.0, "num", (1.0, 20000.0)),
    "wall_specific_heat": ("wall_specific_heat_j_kgk", 1.0, "num", (1.0, 10000.0)),
    "wall_layers": ("wall_layers", 1.0, "int", (2, 50)),
    "leak_area_cm2": ("leak_area_m2", 1e-4, "num", (0.0, 1e5)),
    "casing_h": ("casing_h_w_m2k", 1.0, "num", (0.0, 1000.0)),
    "casing_emissivity": ("casing_emissivity", 1.0, "num", (0.0, 1.0)),
    "door_area_cm2": ("door_area_m2", 1e-4, "num", (0.0, 1e5)),
    "cycle_s": ("cycle_s", 1.0, "num", (0.05, 600.0)),
    "kp": ("kp", 1.0, "num", (0.0, 1000.0)),
    "ti_s": ("ti_s", 1.0, "num", (0.0, 1e6)),
    "td_s": ("td_s", 1.0, "num", (0.0, 1e5)),
    "output_max_pct": ("output_max_pct", 1.0, "num", (0.0, 100.0)),
    "setpoint_max": ("setpoint_max_c", 1.0, "num", (0.0, 2000.0)),
    "chamber_tc_lag_s": ("chamber_tc_lag_s", 1.0, "num", (0.0, 3600.0)),
    "keep_settings": ("keep_settings", 1.0, "bool", (0, 0)),
    "power_on_setpoint": ("power_on_setpoint_c", 1.0, "num", (-50.0, 2000.0)),
    "run_at_power_on": ("run_at_power_on", 1.0, "bool", (0, 0)),
}
_LOAD_KEYS: dict[str, tuple[str, float, str, tuple[float, float]]] = {
    "thickness_mm": ("thickness_m", 1e-3, "num", (0.01, 1000.0)),
    "width_mm": ("width_m", 1e-3, "num", (0.1, 10000.0)),
    "length_mm": ("length_m", 1e-3, "num", (0.1, 10000.0)),
    "density": ("density_kg_m3", 1.0, "num", (1.0, 30000.0)),
    "specific_heat": ("specific_heat_j_kgk", 1.0, "num", (1.0, 10000.0)),
    "conductivity": ("conductivity_w_mk", 1.0, "num", (0.001, 5000.0)),
    "emissivity": ("emissivity", 1.0, "num", (0.0, 1.0)),
    "h_w_m2k": ("h_w_m2k", 1.0, "num", (0.0, 1e6)),
    "layers": ("layers", 1.0, "int", (1, 50)),
    "tc_lag_s": ("tc_lag_s", 1.0, "num", (0.0, 3600.0)),
    "foil_emissivity": ("foil_emissivity", 1.0, "num", (0.0, 1.0)),
    "foil_gap_mm": ("foil_gap_m", 1e-3, "num", (0.01, 20.0)),
}
_DEVICE_OTHER = ("kind", "speed", "seed", "room", "control", "baud", "address", "load",
                 "noise", "fault", "port", "map", "layout")
_NOISE_KEYS = ("chamber_c", "load_c", "resolution_c")
_FAULT_KEYS = ("at", "kind", "for", "rate_c_per_h", "share")


def _number(value: object, kind: str, lo: float, hi: float) -> tuple[float | None, str]:
    """The value as a number within [lo, hi], or None and what is wrong."""
    if kind == "bool":
        if isinstance(value, bool):
            return float(value), ""
        return None, "needs true or false"
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None, f"needs a number, not {_shown(value)}"
    if kind == "int" and not isinstance(value, int):
        return None, f"needs a whole number, not {_shown(value)}"
    if not (lo <= value <= hi) or not math.isfinite(value):
        return None, f"needs a number from {_g(lo)} to {_g(hi)}, not {_g(value)}"
    return float(value), ""


def _g(x: float) -> str:
    return f"{x:g}"


def _shown(value: object) -> str:
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, Mapping):
        return "a table"
    if isinstance(value, list):
        return "a list"
    return str(value)


def _apply(
    table: Mapping[str, Any],
    keys: dict[str, tuple[str, float, str, tuple[float, float]]],
    path: tuple[str | int, ...],
    problems: Problems,
) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, (name, factor, kind, (lo, hi)) in keys.items():
        if key not in table:
            continue
        number, why = _number(table[key], kind, lo, hi)
        if number is None:
            problems.append(((*path, key), f'"{key}" {why}'))
        elif kind == "bool":
            out[name] = bool(number)
        elif kind == "int":
            out[name] = int(number)
        else:
            out[name] = number * factor
    return out


def _unknown_keys(
    table: Mapping[str, Any], allowed: tuple[str, ...] | list[str],
    path: tuple[str | int, ...], problems: Problems,
) -> None:
    for key in table:
        if key not in allowed:
            problems.append(((*path, str(key)), _unknown("key", str(key), list(allowed))))


def check_sim_settings(table: Mapping[str, Any]) -> tuple[SimConfig | None, Problems]:
    """Check a kiln file (or just its `[device]` table) for the simulator; never raises.

    Returns the settings, or None and the problems as (key path, plain-words message) pairs,
    e.g. (("device", "fault", 0, "kind"), 'unknown fault kind "door" (did you mean
    "door-open"?)').
    """
    problems: Problems = []
    try:
        config = _check(table, problems)
    except Exception as exc:  # a bug here must still not become a traceback for the user
        problems.append((("device",), f"could not read the simulator settings ({exc})"))
        return None, problems
    return (None if problems else config), problems


def _check(table: Mapping[str, Any], problems: Problems) -> SimConfig | None:
    if not isinstance(table, Mapping):
        problems.append(((), "the settings need to be a table"))
        return None
    device = table.get("device", table) if "device" in table else table
    path: tuple[str | int, ...] = ("device",)
    if not isinstance(device, Mapping):
        problems.append((path, "[device] needs to be a table"))
        return None
    _unknown_keys(device, list(_DEVICE_OTHER) + list(_OVEN_KEYS), path, problems)
    kind = device.get("kind", "sim")
    if kind != "sim":
        problems.append(((*path, "kind"), f'the simulator needs kind = "sim", not {_shown(kind)}'))
    oven_values = _apply(device, _OVEN_KEYS, path, problems)
    control = device.get("control", "ssr")
    if not isinstance(control, str):
        problems.append(((*path, "control"), 'control must be text: "ssr" or "proportional"'))
    elif control not in ("ssr", "proportional"):
        problems.append(((*path, "control"), _unknown("control", str(control),
                                                      ["ssr", "proportional"])))
    else:
        oven_values["control"] = control
    top: dict[str, Any] = {}
    layout = device.get("layout", "sim")
    if not isinstance(layout, str):
        problems.append(((*path, "layout"), "layout must be text: "
                         + ", ".join(f'"{name}"' for name in LAYOUT_NAMES)))
    elif layout not in LAYOUT_NAMES:
        problems.append(((*path, "layout"), _unknown("layout", layout, LAYOUT_NAMES)))
    else:
        top["layout"] = layout
    speed = device.get("speed", 1)
    if speed == "max":
        top["speed"] = None
    else:
        number, why = _number(speed, "num", 0.001, 1e6)
        if number is None:
            problems.append(((*path, "speed"), f'"speed" {why} or "max"'))
        else:
            top["speed"] = number
    for key, name, kind_, lo, hi in (
        ("seed", "seed", "int", 0, 2**63), ("room", "room_c", "num", -40.0, 60.0),
        ("baud", "baud", "int", 300, 1_000_000), ("address", "address", "int", 1, 247),
    ):
        if key in device:
            number, why = _number(device[key], kind_, lo, hi)
            if number is None:
                problems.append(((*path, key), f'"{key}" {why}'))
            else:
                top[name] = int(number) if kind_ == "int" else number
    load, load_tc = _check_load(device, path, problems)
    top.update(_check_noise(device, path, problems))
    faults = _check_faults(device, path, problems)
    try:
        oven = OvenConfig(**oven_values)
    except TypeError as exc:
        problems.append((path, f"bad oven settings ({exc})"))
        return None
    return SimConfig(oven=oven, load=load, load_thermocouple=load_tc, faults=faults, **top)


def _check_load(
    device: Mapping[str, Any], path: tuple[str | int, ...], problems: Problems
) -> tuple[LoadConfig | None, bool]:
    raw = device.get("load", {})
    if raw is False:
        return None, False
    lpath = (*path, "load")
    if not isinstance(raw, Mapping):
        problems.append((lpath, '"load" needs to be a table [device.load], or false for none'))
        return None, False
    _unknown_keys(raw, [*_LOAD_KEYS, "material", "thermocouple", "wrap"], lpath, problems)
    material = raw.get("material", "carbon steel")
    if not isinstance(material, str):  # a list or table is unhashable: no dict lookup with it
        names = [f'"{m}"' for m in MATERIALS]
        problems.append(((*lpath, "material"),
                         f"material must be text: {', '.join(names[:-1])} or {names[-1]}"))
        material = "carbon steel"
    elif material not in MATERIALS:
        problems.append(((*lpath, "material"), _unknown("material", str(material),
                                                        list(MATERIALS))))
        material = "carbon steel"
    values = _apply(raw, _LOAD_KEYS, lpath, problems)
    wrap = raw.get("wrap", "none")
    if not isinstance(wrap, str):
        problems.append(((*lpath, "wrap"), 'wrap must be text: "none" or "foil"'))
    elif wrap not in WRAPS:
        problems.append(((*lpath, "wrap"), _unknown("wrap", wrap, WRAPS)))
    else:
        values["wrap"] = wrap
    tc = raw.get("thermocouple", True)
    if not isinstance(tc, bool):
        problems.append(((*lpath, "thermocouple"), '"thermocouple" needs true or false'))
        tc = True
    return LoadConfig.of_material(material, **values), tc


def _check_noise(
    device: Mapping[str, Any], path: tuple[str | int, ...], problems: Problems
) -> dict[str, float]:
    raw = device.get("noise", {})
    npath = (*path, "noise")
    if not isinstance(raw, Mapping):
        problems.append((npath, '"noise" needs to be a table [device.noise]'))
        return {}
    _unknown_keys(raw, _NOISE_KEYS, npath, problems)
    out: dict[str, float] = {}
    for key, name in (("chamber_c", "noise_c"), ("load_c", "load_noise_c"),
                      ("resolution_c", "resolution_c")):
        if key in raw:
            number, why = _number(raw[key], "num", 0.0, 100.0)
            if number is None:
                problems.append(((*npath, key), f'"{key}" {why}'))
            else:
                out[name] = number
    return out


def _check_faults(
    device: Mapping[str, Any], path: tuple[str | int, ...], problems: Problems
) -> tuple[Fault, ...]:
    raw = device.get("fault", [])
    if isinstance(raw, Mapping):
        raw = [raw]
    if not isinstance(raw, list):
        problems.append(((*path, "fault"), "faults need to be [[device.fault]] tables"))
        return ()
    faults: list[Fault] = []
    for index, entry in enumerate(raw):
        fpath = (*path, "fault", index)
        if not isinstance(entry, Mapping):
            problems.append((fpath, "each [[device.fault]] needs to be a table"))
            continue
        _unknown_keys(entry, _FAULT_KEYS, fpath, problems)
        ok = True
        kind = entry.get("kind")
        if kind is None:
            problems.append(((*fpath, "kind"), 'a fault needs a "kind", e.g. "door-open"'))
            ok = False
        elif not isinstance(kind, str):
            problems.append(((*fpath, "kind"), 'a fault "kind" must be text, e.g. "door-open"'))
            ok = False
        elif kind not in FAULT_KINDS:
            problems.append(((*fpath, "kind"), _unknown("fault kind", str(kind), FAULT_KINDS)))
            ok = False
        times: dict[str, float | None] = {"at": None, "for": None}
        for key in ("at", "for"):
            if key not in entry:
                if key == "at":
                    problems.append(((*fpath, "at"), 'a fault needs "at", e.g. at = "15m"'))
                    ok = False
                continue
            try:
                times[key] = parse_duration(entry[key])
            except ValueError as exc:
                problems.append(((*fpath, key), f'"{key}" needs {exc}, not {_shown(entry[key])}'))
                ok = False
        extra: dict[str, float] = {}
        if "rate_c_per_h" in entry:
            number, why = _number(entry["rate_c_per_h"], "num", -10000.0, 10000.0)
            if number is None:
                problems.append(((*fpath, "rate_c_per_h"), f'"rate_c_per_h" {why}'))
                ok = False
            else:
                extra["rate_c_per_h"] = number
        if "share" in entry:
            number, why = _number(entry["share"], "num", 0.0, 1.0)
            if number is None:
                problems.append(((*fpath, "share"), f'"share" {why}'))
                ok = False
            else:
                extra["share"] = number
        if ok and kind is not None and times["at"] is not None:
            faults.append(Fault(kind=str(kind), at_s=times["at"], for_s=times["for"], **extra))
    return tuple(faults)
