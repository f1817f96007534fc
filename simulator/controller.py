"""The simulated temperature controller: PID on the chamber thermocouple.

Output 0..output_max %, with conditional integration (the integral stops growing while the
output is pinned at a limit and the error would push it further) so a long ramp at full
power does not leave a wound-up integral that overshoots the hold. Derivative acts on the
measurement, not the error, so a setpoint step does not kick the output.
"""

from __future__ import annotations

from tuikiln.simulator.config import OvenConfig


class PidController:
    """Setpoint, run/stop and the PID state; `update(h, measured_c)` returns output %."""

    __slots__ = ("kp", "ki", "kd", "out_max", "setpoint_c", "running", "integral",
                 "last_pv", "output_pct", "setpoint_max_c")

    def __init__(self, oven: OvenConfig) -> None:
        self.kp = oven.kp
        self.ki = oven.kp / oven.ti_s if oven.ti_s > 0 else 0.0
        self.kd = oven.kp * oven.td_s
        self.out_max = oven.output_max_pct
        self.setpoint_max_c = oven.setpoint_max_c
        self.setpoint_c = oven.power_on_setpoint_c
        self.running = oven.run_at_power_on
        self.integral = 0.0
        self.last_pv: float | None = None
        self.output_pct = 0.0

    def set_setpoint(self, celsius: float) -> float:
        """Store a setpoint, clamped to the controller's limits; returns what was stored."""
        self.setpoint_c = min(max(celsius, 0.0), self.setpoint_max_c)
        return self.setpoint_c

    def set_running(self, on: bool) -> None:
        if on and not self.running:
            self.integral = 0.0
            self.last_pv = None
        self.running = on

    def reset_state(self) -> None:
        self.integral = 0.0
        self.last_pv = None
        self.output_pct = 0.0

    def update(self, h: float, measured_c: float | None) -> float:
        """One control update, h seconds after the previous one; None means the sensor is
        broken (output off). Updates closer than 1 ms keep the previous output, so a sliver
        of a step cannot blow up the derivative."""
        if not self.running or measured_c is None:
            self.output_pct = 0.0
            self.integral = 0.0
            self.last_pv = measured_c
            return 0.0
        if h < 1e-3 and self.last_pv is not None:
            return self.output_pct
        error = self.setpoint_c - measured_c
        p = self.kp * error
        d = 0.0
        if self.last_pv is not None:
            d = -self.kd * (measured_c - self.last_pv) / h
        self.last_pv = measured_c
        integral = self.integral + self.ki * error * h
        out = p + integral + d
        hi = self.out_max
        if out > hi:
            if error <= 0.0:
                self.integral = integral
            out = hi
        elif out < 0.0:
            if error >= 0.0:
                self.integral = integral
            out = 0.0
        else:
            self.integral = integral
        # Bound the integral itself so it never needs long to unwind.
        if self.integral > hi:
            self.integral = hi
        elif self.integral < 0.0:
            self.integral = 0.0
        self.output_pct = out
        return out
