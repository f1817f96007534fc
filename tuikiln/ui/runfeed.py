"""What a screen knows about a run, and the link it reads it through.

A live run is a replay whose end keeps moving: both screens read the run log with the same
code (a `RunLink`), the live one again and again. `SampleBuffer` keeps the samples read so
far in growable numpy columns, so appending a second's worth never copies a week's.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np

from tuikiln.engine.status import Status
from tuikiln.plan import Plan
from tuikiln.profile import Profile
from tuikiln.units import Units

SAMPLE_COLUMNS = ("t", "chamber_c", "load_c", "core_c", "setpoint_c", "output_pct", "step",
                  "state")


@dataclass(frozen=True)
class RunHeader:
    """The parts of a run that do not change while it goes."""

    run_id: int
    profile: Profile
    plan: Plan
    started: float
    """Epoch seconds on the engine's clock (simulated time in a simulated run)."""
    kiln_name: str = ""
    units: Units = "C"
    outcome: str | None = None
    ended: float | None = None
    extra: Mapping[str, Any] = field(default_factory=dict)


class RunLink(Protocol):
    """How a screen reaches a run. Reads are blocking (SQLite): call them in a worker thread.

    `status` and `command` talk to the engine that owns the run; when no engine is there
    (the run ended, or a replay) `status` returns None and `command` says so in words.
    """

    def info(self) -> RunHeader: ...

    def read_samples(self, since_t: float | None) -> Mapping[str, np.ndarray]:
        """Samples with t > since_t (all of them when None), as columns named SAMPLE_COLUMNS."""

    def read_events(self, after_id: int) -> Sequence[Mapping[str, Any]]:
        """Events with id > after_id: dicts with id, time, kind, message, severity, detail."""

    async def status(self) -> Status | None: ...

    async def command(self, name: str, arg: str | None = None) -> tuple[bool, str]:
        """Send one command (`arg`: a note's text, an alarm's code); (accepted, words)."""

    def close(self) -> None: ...


class SampleBuffer:
    """Columns of samples that grow by doubling (amortised O(1) append)."""

    def __init__(self, capacity: int = 4096) -> None:
        self._size = 0
        self._has_values: set[str] = set()
        self._columns: dict[str, np.ndarray] = {
            name: np.full(capacity, np.nan, dtype=np.float64 if name == "t" else np.float32)
            for name in SAMPLE_COLUMNS
        }

    def __len__(self) -> int:
        return self._size

    @property
    def last_t(self) -> float | None:
        return float(self._columns["t"][self._size - 1]) if self._size else None

    def column(self, name: str) -> np.ndarray:
        """A view (no copy) of the samples held so far."""
        return self._columns[name][: self._size]

    def append(self, batch: Mapping[str, np.ndarray]) -> int:
        """Add a batch of columns (missing ones become NaN); returns how many rows were added."""
        t = np.asarray(batch.get("t", ()), dtype=np.float64)
        count = int(t.size)
        if count == 0:
            return 0
        if self.last_t is not None:
            fresh = t > self.last_t  # a re-read overlap must not duplicate samples
            if not fresh.all():
                batch = {k: np.asarray(v)[fresh] for k, v in batch.items()}
                t = t[fresh]
                count = int(t.size)
                if count == 0:
                    return 0
        needed = self._size + count
        capacity = self._columns["t"].shape[0]
        if needed > capacity:
            new_capacity = max(needed, capacity * 2)
            for name, old in self._columns.items():
                grown = np.full(new_capacity, np.nan, dtype=old.dtype)
                grown[: self._size] = old[: self._size]
                self._columns[name] = grown
        for name, target in self._columns.items():
            values = batch.get(name)
            if values is None:
                continue
            values = np.asarray(values, dtype=float)
            target[self._size : needed] = values
            if name not in self._has_values and np.isfinite(values).any():
                self._has_values.add(name)
        self._size = needed
        return count

    def has_values(self, name: str) -> bool:
        """Whether any sample so far has a value in this column (e.g. a load thermocouple)."""
        return name in self._has_values

    @property
    def nbytes(self) -> int:
        return sum(column.nbytes for column in self._columns.values())


def finite(value: Any) -> float | None:
    """A number from a status object, or None for missing/NaN."""
    if value is None or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None
