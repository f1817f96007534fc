"""One way from a log to a replay: our run log and other tools' CSV logs alike.

    loaded = from_log(samples, events, started=..., profile=..., kiln_text=..., ...)
    loaded = from_csv(path, layout, profile, kiln)
    result = loaded.replay(c=..., quench_below_c=...)

`tuikiln replay`, `report`, `import` and the review screen all go through here, so a run is
judged with the same thresholds (the kiln's [alarms], then the profile's [limits]) and the
same rules wherever it is looked at.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from tuikiln.analysis import temper as temper_rules
from tuikiln.analysis.replay import DEFAULT_QUENCH_BELOW_C, Replay, Trace, replay_run
from tuikiln.errors import FileProblems, UserError
from tuikiln.limits import Limits
from tuikiln.profile import Profile
from tuikiln.units import Units


@dataclass
class Loaded:
    """A log and everything needed to replay it."""

    trace: Trace
    profile: Profile
    limits: Limits
    events: list[dict[str, Any]]
    outcome: str | None
    units: Units
    max_c: float | None
    run: dict[str, Any] = field(default_factory=dict)
    rerun: bool | None = None
    """None: the logged step states when there are some; True: the rules run again."""
    same_profile: bool = True

    def replay(self, limits: Limits | None = None, *, rerun: bool | None = None,
               c: float = temper_rules.DEFAULT_C,
               quench_below_c: float = DEFAULT_QUENCH_BELOW_C,
               units: Units | None = None) -> Replay:
        return replay_run(self.trace, self.profile, limits or self.limits, events=self.events,
                          outcome=self.outcome, units=units or self.units, max_c=self.max_c,
                          rerun=self.rerun if rerun is None else rerun,
                          same_profile=self.same_profile, c=c, quench_below_c=quench_below_c,
                          run=self.run)


def run_thresholds(profile: Profile, kiln_text: str, source: str) -> tuple[Limits, float | None]:
    """The thresholds a run went by: defaults, the kiln's [alarms], the profile's [limits];
    and the kiln's maximum. A stored kiln file that no longer checks gives the defaults."""
    from tuikiln.kiln import Kiln, parse_kiln

    kiln = Kiln()
    if kiln_text:
        try:
            kiln = parse_kiln(kiln_text, source)
        except FileProblems:
            kiln = Kiln()
    return Limits().merged(kiln.alarms).merged(profile.limits), kiln.max_c


def from_log(samples: Mapping[str, np.ndarray], events: Sequence[Mapping[str, Any]], *,
             started: float, profile: Profile, outcome: str | None, units: Units,
             kiln_text: str = "", against: Profile | None = None,
             run: Mapping[str, Any] | None = None) -> Loaded:
    """A run from our own run log (`against`: hold it against another profile instead)."""
    used = against or profile
    limits, max_c = run_thresholds(used, kiln_text, "the run's kiln file")
    return Loaded(Trace.from_samples(samples, started), used, limits,
                  [dict(e) for e in events], outcome, units, max_c, dict(run or {}),
                  True if against is not None else None, against is None)


def from_csv(path: str | Path, layout: Any, profile: Profile, kiln: Any = None) -> Loaded:
    """Another tool's CSV log (or our export), read whole, held against `profile`."""
    from tuikiln.analysis.csvlog import read_csv_log

    log = read_csv_log(path, layout)  # all or nothing: FileProblems lists the bad lines
    if log.time_s.size < 2:
        raise UserError(f"{path}: the log has fewer than two rows of readings")
    samples = {"t": log.time_s, "chamber_c": log.chamber_c}
    if log.load_c is not None:
        samples["load_c"] = log.load_c
    alarms = kiln.alarms if kiln is not None else {}
    limits = Limits().merged(alarms).merged(profile.limits)
    run: dict[str, Any] = {"csv": str(path), "profile": profile.name}
    if log.start_epoch is not None:
        run["started_epoch"] = log.start_epoch
    return Loaded(Trace.from_samples(samples, float(log.time_s[0])), profile, limits, [],
                  None, profile.units, kiln.max_c if kiln is not None else None, run, True,
                  True)
