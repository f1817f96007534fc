"""The simulated oven with its controller: what the engine talks to, in process or over Modbus.

    kiln = SimulatedKiln(SimConfig(), seed=0)
    kiln.set_setpoint(500.0); kiln.set_running(True)
    kiln.advance(60.0)            # physics, controller and faults move on one minute
    kiln.read()                   # what the controller reports (noise, lag, resolution)
    kiln.truth                    # the true temperatures (tests and benchmarks only)

Time advances only through `advance`; `simulator.clock` paces it against the wall clock.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass

from tuikiln.simulator.config import Fault, SimConfig
from tuikiln.simulator.controller import PidController
from tuikiln.simulator.physics import DOOR_AIR_MIX, KELVIN, OvenPhysics

MAX_STEP_S = 1.0
OPEN_READING = 32767  # register value of an open or absent thermocouple (over-range)


@dataclass(frozen=True)
class SimReading:
    """What the controller would report now."""

    time_s: float
    chamber_c: float | None
    """Chamber thermocouple, °C; None when it is open."""
    load_c: float | None
    """Thermocouple on the load surface, °C; None when absent or open."""
    setpoint_c: float
    output_pct: float
    sensor_fault: bool
    running: bool
    line_answers: bool
    """False while the serial line is silent (link-drop, controller rebooting)."""
    garbled: bool
    """True while line noise garbles replies."""


@dataclass(frozen=True)
class SimTruth:
    """True temperatures, no noise and no lag: for tests and benchmarks, never the engine."""

    chamber_c: float
    load_surface_c: float | None
    load_core_c: float | None
    casing_c: float
    heater_w: float
    """Average heater power over the last step, W."""


class RegisterError(ValueError):
    """A Modbus request the controller refuses; `code` is the Modbus exception code."""

    def __init__(self, code: int, message: str) -> None:
        super().__init__(message)
        self.code = code


REGISTER_COUNT = 6


def to_register(celsius: float | None) -> int:
    """Tenths of a degree as an unsigned 16-bit register (signed int16 on the wire)."""
    if celsius is None:
        return OPEN_READING
    tenths = int(round(celsius * 10.0))
    tenths = max(-32768, min(32766, tenths))
    return tenths & 0xFFFF


class SimulatedKiln:
    """Oven physics, PID controller, thermocouples and scheduled faults."""

    def __init__(self, config: SimConfig | None = None, seed: int | None = None) -> None:
        self.config = config = config or SimConfig()
        self.rng = random.Random(config.seed if seed is None else seed)
        self.physics = OvenPhysics(config.oven, config.load, config.room_c)
        self.controller = PidController(config.oven)
        oven = config.oven
        self._heater_w = oven.heater_w
        self._ssr = oven.control == "ssr"
        self._cycle_s = oven.cycle_s
        self._chamber_lag_s = oven.chamber_tc_lag_s
        self._load_lag_s = config.load.tc_lag_s if config.load is not None else 1.0
        self.has_load_tc = config.load is not None and config.load_thermocouple
        room = config.room_c
        self.chamber_tc_c = room
        self.load_tc_c = room
        self.time_s = 0.0
        self._last_control_t = 0.0
        self.last_heater_w = 0.0
        self._lag_h = -1.0
        self._lag_a_chamber = 0.0
        self._lag_a_load = 0.0
        # Fault state.
        self._schedule: list[tuple[float, float, Fault]] = []
        self._next_event = math.inf
        self.element_open = False
        self.relay_welded = False
        self.tc_open = False
        self.door_open = False
        self.link_dropped = False
        self.rebooting = False
        self.line_noise_share = 0.0
        self._drift: Fault | None = None
        self._drift_start = 0.0
        self.drift_c = 0.0
        self._saved_settings: tuple[float, bool] | None = None
        self._any_fault = False
        for fault in config.faults:
            self.inject(fault)

    # ----- commands (what a Modbus write does) -----

    def set_setpoint(self, celsius: float) -> None:
        self.controller.set_setpoint(float(celsius))

    def set_running(self, on: bool) -> None:
        self.controller.set_running(bool(on))

    def open_door(self, seconds: float) -> None:
        """Open the door now for `seconds`."""
        self.inject(Fault("door-open", self.time_s, seconds))

    def inject(self, fault: Fault | str, for_s: float | None = None, **extra: float) -> Fault:
        """Schedule a fault (its `at_s` is from the start; a kind alone starts it now)."""
        if isinstance(fault, str):
            fault = Fault(fault, self.time_s, for_s, **extra)
        start = max(fault.at_s, self.time_s)
        self._schedule.append((start, start + fault.duration_s(), fault))
        self._next_event = min(self._next_event, start)
        if start <= self.time_s:
            self._update_faults()
        return fault

    # ----- time -----

    def advance(self, dt_s: float) -> None:
        """Move physics, controller and faults on by dt_s seconds (sub-steps of <= 1 s)."""
        if not dt_s > 0.0:
            return
        # Hot loop (86,400 turns for a simulated day): state lives in locals and goes back to
        # the object at the end; fault flags are read again after each fault event.
        physics = self.physics
        step = physics.step
        update = self.controller.update
        load = physics.load
        surface = physics.load_surface_index if load is not None else 0
        heater_w = self._heater_w
        ssr = self._ssr
        on_fraction = self._on_fraction
        room_k = physics.room_k
        chamber_tc = self.chamber_tc_c
        load_tc = self.load_tc_c
        last_control = self._last_control_t
        end = self.time_s + dt_s
        t = self.time_s
        power = self.last_heater_w
        while end - t > 1e-9:
            next_event = self._next_event
            if t >= next_event:
                self.time_s = t
                self._update_faults()
                next_event = self._next_event
            h = end - t
            if h > MAX_STEP_S:
                h = MAX_STEP_S
            if next_event - t < h:
                h = max(next_event - t, 1e-6)
            if h != self._lag_h:
                self._set_lag(h)
            a_chamber = self._lag_a_chamber
            # The controller sees its own thermocouple (lagged, drifting, maybe open); its
            # derivative and integral need the time since its previous update.
            since = t - last_control
            if since >= 1e-3:
                last_control = t
            if self._any_fault:
                broken = self.tc_open or self.rebooting
                out = update(since, None if broken else chamber_tc + self.drift_c)
                if self.element_open or self.rebooting:
                    power = 0.0
                elif self.relay_welded:
                    power = heater_w
                elif ssr:
                    power = heater_w * on_fraction(t, h, out * 0.01)
                else:
                    power = heater_w * out * 0.01
            else:
                out = update(since, chamber_tc)
                power = heater_w * (on_fraction(t, h, out * 0.01) if ssr else out * 0.01)
            step(h, power)
            t += h
            tc = physics.chamber_k
            if self._any_fault:
                if self._drift is not None:
                    self.drift_c = self._drift.rate_c_per_h * (t - self._drift_start) / 3600.0
                if self.door_open:
                    tc -= DOOR_AIR_MIX * (tc - room_k)
            chamber_tc += (tc - KELVIN - chamber_tc) * a_chamber
            if load is not None:
                load_tc += (load.temps[surface] - KELVIN - load_tc) * self._lag_a_load
        self.last_heater_w = power
        self.chamber_tc_c = chamber_tc
        self.load_tc_c = load_tc
        self._last_control_t = last_control
        self.time_s = end

    def _set_lag(self, h: float) -> None:
        self._lag_h = h
        self._lag_a_chamber = -math.expm1(-h / self._chamber_lag_s) if self._chamber_lag_s else 1.0
        self._lag_a_load = -math.expm1(-h / self._load_lag_s) if self._load_lag_s else 1.0

    def _on_fraction(self, t: float, h: float, duty: float) -> float:
        """Share of [t, t+h] the time-proportioned output is on, duty latched per call."""
        if duty <= 0.0:
            return 0.0
        if duty >= 1.0:
            return 1.0
        cycle = self._cycle_s
        on = duty * cycle
        # On-time from 0 to x is whole cycles' on-time plus the part of the current one.
        n0 = (t // cycle)
        n1 = ((t + h) // cycle)
        r0 = t - n0 * cycle
        r1 = t + h - n1 * cycle
        total = (n1 - n0) * on + (r1 if r1 < on else on) - (r0 if r0 < on else on)
        return total / h

    def _update_faults(self) -> None:
        now = self.time_s
        was_rebooting = self.rebooting
        self.element_open = self.relay_welded = self.tc_open = False
        self.door_open = self.link_dropped = self.rebooting = False
        self.line_noise_share = 0.0
        drift: Fault | None = None
        drift_start = 0.0
        upcoming = math.inf
        for start, stop, fault in self._schedule:
            if start > now:
                upcoming = min(upcoming, start)
                continue
            if stop <= now:
                continue
            upcoming = min(upcoming, stop)
            kind = fault.kind
            if kind == "element-open":
                self.element_open = True
            elif kind == "relay-welded":
                self.relay_welded = True
            elif kind == "tc-open":
                self.tc_open = True
            elif kind == "tc-drift":
                drift, drift_start = fault, start
            elif kind == "door-open":
                self.door_open = True
            elif kind == "link-drop":
                self.link_dropped = True
            elif kind == "line-noise":
                self.line_noise_share = max(self.line_noise_share, fault.share)
            elif kind == "controller-reboot":
                self.rebooting = True
        self._any_fault = any(
            start <= now < stop for start, stop, _ in self._schedule
        )
        if drift is not self._drift:
            self._drift, self._drift_start = drift, drift_start
            self.drift_c = 0.0 if drift is None else drift.rate_c_per_h * (now - drift_start) / 3600
        self.physics.door_open = self.door_open
        if self.rebooting and not was_rebooting:
            self._power_lost()
        elif was_rebooting and not self.rebooting:
            self._power_back()
        self._next_event = upcoming

    def _power_lost(self) -> None:
        c = self.controller
        self._saved_settings = (c.setpoint_c, c.running)
        c.reset_state()

    def _power_back(self) -> None:
        oven = self.config.oven
        c = self.controller
        if oven.keep_settings and self._saved_settings is not None:
            c.setpoint_c, running = self._saved_settings
        else:
            c.setpoint_c, running = oven.power_on_setpoint_c, oven.run_at_power_on
        c.running = False
        c.set_running(running)

    # ----- what the controller reports -----

    @property
    def line_answers(self) -> bool:
        return not (self.link_dropped or self.rebooting)

    def read(self) -> SimReading:
        cfg = self.config
        res = cfg.resolution_c
        gauss = self.rng.gauss
        chamber: float | None = None
        if not self.tc_open:
            chamber = self.chamber_tc_c + self.drift_c
            if cfg.noise_c:
                chamber += gauss(0.0, cfg.noise_c)
            chamber = _quantise(chamber, res)
        load: float | None = None
        if self.has_load_tc:
            load = self.load_tc_c
            if cfg.load_noise_c:
                load += gauss(0.0, cfg.load_noise_c)
            load = _quantise(load, res)
        c = self.controller
        return SimReading(
            time_s=self.time_s,
            chamber_c=chamber,
            load_c=load,
            setpoint_c=c.setpoint_c,
            output_pct=c.output_pct,
            sensor_fault=self.tc_open,
            running=c.running,
            line_answers=self.line_answers,
            garbled=self.line_noise_share > 0.0,
        )

    @property
    def truth(self) -> SimTruth:
        p = self.physics
        return SimTruth(
            chamber_c=p.chamber_c,
            load_surface_c=p.load_surface_c,
            load_core_c=p.load_core_c,
            casing_c=p.casing_c,
            heater_w=self.last_heater_w,
        )

    def registers(self) -> list[int]:
        """Holding registers 0..5 as unsigned 16-bit values (see drivers/maps/sim.toml)."""
        r = self.read()
        status = (1 if r.sensor_fault else 0) | (2 if r.running else 0)
        return [
            to_register(r.chamber_c),
            to_register(r.setpoint_c),
            int(round(r.output_pct * 10.0)) & 0xFFFF,
            status,
            1 if r.running else 0,
            to_register(r.load_c),
        ]

    def write_register(self, address: int, value: int) -> None:
        """A Modbus write of one holding register; RegisterError when refused."""
        if not 0 <= value <= 0xFFFF:
            raise RegisterError(3, f"register value {value} is not 0..65535")
        if address == 1:
            signed = value - 0x10000 if value >= 0x8000 else value
            celsius = signed / 10.0
            if not 0.0 <= celsius <= self.config.oven.setpoint_max_c:
                raise RegisterError(
                    3, f"setpoint {celsius:g} °C is outside 0..{self.config.oven.setpoint_max_c:g}"
                )
            self.set_setpoint(celsius)
        elif address == 4:
            if value not in (0, 1):
                raise RegisterError(3, f"run register takes 0 or 1, not {value}")
            self.set_running(value == 1)
        elif 0 <= address < REGISTER_COUNT:
            raise RegisterError(2, f"register {address} is read-only")
        else:
            raise RegisterError(2, f"there is no register {address}")


def _quantise(value: float, resolution: float) -> float:
    if resolution <= 0.0:
        return value
    return round(round(value / resolution) * resolution, 6)
