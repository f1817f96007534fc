"""When a setpoint is worth writing: the write guard.

Many panel controllers keep their setpoint in EEPROM, whose cells survive only on the order
of 100,000 to 1,000,000 writes (common practice, no source; makers' manuals warn against
writing the setpoint continuously over the serial port). A ramp that rewrote the setpoint
every second would use up 100,000 writes in about a day. So the guard writes only when the
value moves by at least what the controller can store, and no more often than a minimum
interval -- except when the setpoint drops to the safe value: stopping the heat never waits;
nor does the first setpoint after such a stop (a re-arm or a resume), so heating starts again.

The guard decides; the driver writes and reports back with `written()`. A value held back
stays pending, and `due()` tells the driver when to write it on a later poll.
"""

from __future__ import annotations

from dataclasses import dataclass

DEFAULT_MIN_INTERVAL_S = 10.0


@dataclass
class SetpointGuard:
    resolution_c: float = 0.1
    """Smallest step the controller stores; smaller moves are never written."""
    min_interval_s: float = DEFAULT_MIN_INTERVAL_S
    """Shortest time between two ordinary writes."""
    safe_c: float = 0.0
    """The stop/safe setpoint: a drop to it (or below) is written at once."""

    last_written_c: float | None = None
    last_write_time: float | None = None
    pending_c: float | None = None
    writes: int = 0
    held_back: int = 0

    def request(self, target_c: float, now: float) -> bool:
        """A new wanted setpoint; True when it should be written now."""
        self.pending_c = target_c
        if self.due(now):
            return True
        if self.pending_c is not None:
            self.held_back += 1
        return False

    def due(self, now: float) -> bool:
        """Whether the pending value should be written now."""
        target = self.pending_c
        if target is None:
            return False
        last = self.last_written_c
        if last is None:
            return True
        # The controller stores whole steps: a value that rounds to the stored one is there.
        if self._steps(target) == self._steps(last):
            self.pending_c = None
            return False
        if self.is_safe_drop(target) or self.is_leaving_safe(target):
            return True
        if self.last_write_time is None:
            return True
        return now - self.last_write_time >= self.min_interval_s

    def _steps(self, value_c: float) -> int:
        return round(value_c / self.resolution_c) if self.resolution_c > 0 else round(value_c * 1e6)

    def is_safe_drop(self, target_c: float) -> bool:
        last = self.last_written_c
        return (
            target_c <= self.safe_c + self.resolution_c * 0.5
            and (last is None or target_c < last)
        )

    def is_leaving_safe(self, target_c: float) -> bool:
        """The first setpoint after a stop (a re-arm, a resume): held back by the interval,
        the controller would sit at the safe value, not heating. Stops are rare, so this
        costs few writes."""
        last = self.last_written_c
        return (last is not None and last <= self.safe_c + self.resolution_c * 0.5
                and target_c > last)

    def written(self, value_c: float, now: float) -> None:
        """The driver wrote `value_c` at `now`."""
        self.last_written_c = value_c
        self.last_write_time = now
        self.writes += 1
        if self.pending_c is not None and abs(self.pending_c - value_c) < 1e-9:
            self.pending_c = None

    def forget(self) -> None:
        """The device may have lost its setpoint (reconnect, power cycle): write next time."""
        if self.last_written_c is not None and self.pending_c is None:
            self.pending_c = self.last_written_c
        self.last_written_c = None
        self.last_write_time = None
