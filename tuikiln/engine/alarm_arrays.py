"""The alarm rules over whole arrays of logged samples: what `AlarmRules.evaluate` raises and
clears tick by tick, found with numpy one alarm at a time.

    found = alarm_events(rules, seen)   # rules: an AlarmRules (its limits, kiln max, units)
    found.events                        # [(sample index, order in the tick, Event)]

Each check below is the array form of the check of the same name in alarms.py: the same
thresholds (the module's constants and the Limits), the same words (AlarmRules' *_words
methods), the same events (raised_event, cleared_event), and the same bookkeeping (readings
counted in a row, the slow checks every SLOW_EVERY_S, the temperature history every
HISTORY_EVERY_S with its lookup `_temp_ago`, the sliding highest setpoint). Every alarm's
own state depends on the samples alone, never on another alarm, so each is found on its
own and the raises and clears are put back in the order the scalar rules say them.
tests/test_whatif_arrays.py holds this against the per-sample rules on simulated faults.

Times must not go backwards (the caller checks; the per-sample rules take such a log).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from tuikiln.engine import states as st
from tuikiln.engine.alarms import (
    ALARMS,
    BAD_READINGS_TO_ALARM,
    CRITICAL,
    FROZEN_S,
    FULL_OUTPUT_PCT,
    GOOD_READINGS_TO_CLEAR,
    HISTORY_EVERY_S,
    HOT_READINGS_TO_ALARM,
    IMPOSSIBLE_HIGH_C,
    IMPOSSIBLE_LOW_C,
    JUMP_C,
    JUMP_WINDOW_S,
    JUMPS_TO_ALARM,
    NO_RISE_C,
    SETPOINT_LAG_S,
    SLOW_EVERY_S,
    STUCK_OFF_FOR_S,
    STUCK_OUTPUT_PCT,
    STUCK_RISE_C,
    STUCK_RISE_WINDOW_S,
    AlarmRules,
    Observation,
    cleared_event,
    raised_event,
)
from tuikiln.events import Event, Said

# The order AlarmRules.evaluate says its alarms in, within one tick.
ORDER = ("no-link", "no-link-too-long", "sensor-bad", "over-kiln-max", "too-hot", "lagging",
         "no-rise", "heat-stuck-on", "hold-slipped", "never-reached", "paused-too-long")
_RANK = {code: i for i, code in enumerate(ORDER)}
KINDS = ("ramp", "hold", "cool", "pause")
_RAMP, _HOLD, _PAUSE = KINDS.index("ramp"), KINDS.index("hold"), KINDS.index("pause")
_CODE = st.STATE_CODE


@dataclass
class Seen:
    """What the alarm rules see, per sample (NaN: None), as the Observation of each tick."""

    t: np.ndarray
    link_ok: np.ndarray
    chamber_c: np.ndarray
    sensor_fault: np.ndarray
    output_pct: np.ndarray
    setpoint_c: np.ndarray
    target_c: np.ndarray
    kind: np.ndarray
    """The step's kind as its index in KINDS (-1: no step, after the last)."""
    state: np.ndarray
    """Step state code."""
    state_since: np.ndarray
    step_started_at: np.ndarray
    rated_ramp: np.ndarray
    heat_off: np.ndarray


@dataclass
class Found:
    events: list[tuple[int, int, Event]] = field(default_factory=list)
    first_critical: int | None = None
    """The sample of the first critical alarm (the run ends there)."""
    critical_words: str = ""


# ----- exact helpers (the comparisons are the scalar code's, never rearranged) -----

def _first_reaching(ts: np.ndarray, gap: float) -> np.ndarray:
    """For each k, the first m with ts[m] - ts[k] >= gap (ts.size if none); ts sorted."""
    n = ts.size
    k = np.arange(n)
    c = np.searchsorted(ts, ts + gap, side="left")
    for _ in range(8):  # float rounding of ts + gap moves the boundary by a sample at most
        prev = c - 1
        back = (prev > k) & (ts[np.clip(prev, 0, n - 1)] - ts >= gap)
        c = np.where(back, prev, c)
        fwd = (c < n) & ~(ts[np.clip(c, 0, n - 1)] - ts >= gap)
        c = np.where(fwd, c + 1, c)
        if not (back.any() or fwd.any()):
            break
    return c


def _greedy(ts: np.ndarray, gap: float) -> np.ndarray:
    """Positions taken by "the first, then each one at least `gap` after the last taken"."""
    if ts.size == 0:
        return np.zeros(0, dtype=np.int64)
    regular = _greedy_regular(ts, gap)
    if regular is not None:
        return regular
    after = _first_reaching(ts, gap).tolist()
    taken = []
    k, n = 0, ts.size
    while k < n:
        taken.append(k)
        k = after[k]
    return np.asarray(taken, dtype=np.int64)


def _greedy_regular(ts: np.ndarray, gap: float) -> np.ndarray | None:
    """The same positions for evenly spaced samples (a log of our own): every m-th, checked
    exactly (each taken one is the first at least `gap` after the one before); None when
    the samples are not that even."""
    n = ts.size
    if n < 3:
        return None
    stride = int(np.searchsorted(ts, ts[0] + gap, side="left"))
    if stride <= 0 or stride >= n:
        return None
    taken = np.arange(0, n, stride)
    prev, this = taken[:-1], taken[1:]
    if not ((ts[this] - ts[prev] >= gap).all() and (ts[this - 1] - ts[prev] < gap).all()):
        return None
    if ts[n - 1] - ts[taken[-1]] >= gap:
        return None  # the greedy would take one more after the last of the stride
    return taken


def _first_within(ts: np.ndarray, now: np.ndarray, window: float) -> np.ndarray:
    """For each query time, the first j with not (now - ts[j] > window); ts sorted."""
    n = ts.size
    if n == 0:
        return np.zeros(now.size, dtype=np.int64)
    c = np.searchsorted(ts, now - window, side="left")
    for _ in range(8):
        prev = c - 1
        back = (prev >= 0) & ~(now - ts[np.clip(prev, 0, n - 1)] > window)
        c = np.where(back, prev, c)
        fwd = (c < n) & (now - ts[np.clip(c, 0, n - 1)] > window)
        c = np.where(fwd, c + 1, c)
        if not (back.any() or fwd.any()):
            break
    return c


def _last_at_least(ts: np.ndarray, now: np.ndarray, gap: float) -> np.ndarray:
    """For each query time, the last i with now - ts[i] >= gap (-1 if none); ts sorted."""
    n = ts.size
    if n == 0:
        return np.full(now.size, -1, dtype=np.int64)
    c = np.searchsorted(ts, now - gap, side="right") - 1
    for _ in range(8):
        nxt = c + 1
        fwd = (nxt < n) & (now - ts[np.clip(nxt, 0, n - 1)] >= gap)
        c = np.where(fwd, nxt, c)
        back = (c >= 0) & ~(now - ts[np.clip(c, 0, n - 1)] >= gap)
        c = np.where(back, c - 1, c)
        if not (back.any() or fwd.any()):
            break
    return c


def _in_a_row(mask: np.ndarray) -> np.ndarray:
    """How many True in a row end at each position (0 where False): a reset counter."""
    pos = np.arange(mask.size)
    last_false = np.maximum.accumulate(np.where(mask, -1, pos))
    return np.where(mask, pos - last_false, 0)


def _run_start(mask: np.ndarray) -> np.ndarray:
    """Where the current stretch of True began (a "since" set on the first True)."""
    pos = np.arange(mask.size)
    began = mask & ~np.concatenate(([False], mask[:-1]))
    return np.maximum.accumulate(np.where(began, pos, 0))


def _toggles(on: np.ndarray, off: np.ndarray) -> list[tuple[int, int | None]]:
    """(raised at, cleared at) for an alarm raised where `on` and cleared where `off` (sample
    indices, sorted): raised at the first `on` while clear, cleared at the first `off` after."""
    pairs: list[tuple[int, int | None]] = []
    pos = -1
    while True:
        r = int(np.searchsorted(on, pos, side="right"))
        if r >= on.size:
            return pairs
        raised = int(on[r])
        c = int(np.searchsorted(off, raised, side="right"))
        if c >= off.size:
            pairs.append((raised, None))
            return pairs
        pos = int(off[c])
        pairs.append((raised, pos))


class _History:
    """AlarmRules' temperature history (every HISTORY_EVERY_S, trimmed to `keep`) and its
    `_temp_ago` lookup, for queries at many samples at once."""

    def __init__(self, t: np.ndarray, usable: np.ndarray, temp: np.ndarray, keep: float) -> None:
        pos = np.flatnonzero(usable)
        taken = pos[_greedy(t[pos], HISTORY_EVERY_S)]
        self.at = taken
        self.t = t[taken]
        self.v = temp[taken]
        # After the entry m is appended, entries older than `keep` are dropped from the front.
        self.first = _first_within(self.t, self.t, keep)

    def locate(self, samples: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """For each sample: whether there is history yet, its last entry, its first entry."""
        m = np.searchsorted(self.at, samples, side="right") - 1
        have = m >= 0
        mm = np.where(have, m, 0)
        return have, mm, self.first[mm] if self.first.size else mm

    def ago(self, where: tuple[np.ndarray, np.ndarray, np.ndarray], now: np.ndarray,
            seconds: float) -> np.ndarray:
        """The remembered temperature about `seconds` before each sample `locate` found
        (NaN: None)."""
        have, mm, j = where
        out = np.full(mm.size, np.nan)
        if not have.any():
            return out
        enough = have & ~(now - self.t[j] < seconds - HISTORY_EVERY_S)
        guess = j + np.maximum(0, mm - j - int(seconds / HISTORY_EVERY_S))
        last_ok = _last_at_least(self.t, now, seconds - HISTORY_EVERY_S * 0.5)
        pick = np.where(guess <= last_ok, guess, np.maximum(last_ok, j))
        out[enough] = self.v[pick[enough]]
        return out


def _sliding_max(values: np.ndarray, lo: np.ndarray) -> np.ndarray:
    """max(values[lo[k]..k]) for each k (a sparse table; -inf where all are missing)."""
    n = values.size
    if n == 0:
        return values.copy()
    span = np.arange(n) - lo + 1
    levels = [values]  # levels[j][a] = max(values[a : a + 2**j])
    while (1 << len(levels)) <= int(span.max()):
        prev, half = levels[-1], 1 << (len(levels) - 1)
        levels.append(np.maximum(prev[:-half], prev[half:]))
    k = np.floor(np.log2(span)).astype(np.int64)
    out = np.empty(n)
    for level in np.unique(k):
        sel = k == level
        table = levels[level]
        a = lo[sel]
        b = np.flatnonzero(sel) - (1 << int(level)) + 1
        out[sel] = np.maximum(table[a], table[b])
    return out


def _said_at(say: Callable[[float], Said], values: np.ndarray) -> Callable[[int], Said | str]:
    return lambda k: say(float(values[k]))


class _Checks:
    def __init__(self, rules: AlarmRules, seen: Seen) -> None:
        self.rules = rules
        self.limits = rules.limits
        self.s = seen
        t = seen.t
        self.n = t.size
        c = seen.chamber_c
        self.has_temp = np.isfinite(c)
        self.usable = (seen.link_ok & ~seen.sensor_fault & self.has_temp
                       & (IMPOSSIBLE_LOW_C <= c) & (c <= IMPOSSIBLE_HIGH_C))
        self.temp = np.where(self.usable, c, np.nan)
        self.slow = _greedy(t, SLOW_EVERY_S)  # sample indices (t starts the list: _slow_at)
        keep = max(self.limits.stall_for, STUCK_RISE_WINDOW_S, self.limits.behind_for) + 60
        self.history = _History(t, self.usable, self.temp, keep)
        self.found: dict[str, list[tuple[int, int | None]]] = {}
        self.words: dict[str, Callable[[int], Said | str]] = {}

    def _alarm(self, code: str, on: np.ndarray, off: np.ndarray,
               words: Callable[[int], Said | str]) -> None:
        """`on`/`off`: sample indices where the check raises / clears."""
        if code in self.rules.unjudged or on.size == 0:
            return
        self.found[code] = _toggles(on, off)
        self.words[code] = words

    def link(self) -> None:
        s, lim = self.s, self.limits
        if s.link_ok.all():
            return  # never silent: nothing to raise
        pos = np.arange(self.n)
        last = np.maximum.accumulate(np.where(s.link_ok, pos, -1))
        last_ok_t = np.where(last >= 0, s.t[np.maximum(last, 0)], s.t[0])
        silent = s.t - last_ok_t
        ok = np.flatnonzero(s.link_ok)
        for code, limit, say in (
                ("no-link", lim.link_lost, self.rules.no_link_words),
                ("no-link-too-long", lim.link_lost_safe, self.rules.no_link_too_long_words)):
            on = np.flatnonzero(~s.link_ok & (silent >= limit))
            self._alarm(code, on, ok, _said_at(say, silent))

    def sensor(self) -> None:
        s, rules = self.s, self.rules
        if s.link_ok.all():  # the usual log: views, not copies
            at = np.arange(self.n)
            t, fault, bad, temp = s.t, s.sensor_fault, ~self.usable, self.temp
        else:
            at = np.flatnonzero(s.link_ok)  # readings with no answer leave the counts alone
            if at.size == 0:
                return
            t, fault, bad, temp = s.t[at], s.sensor_fault[at], ~self.usable[at], self.temp[at]
        good = ~bad
        any_bad = bool(bad.any())
        jumped = np.abs(np.diff(temp)) > JUMP_C  # NaN (a bad one) never counts
        heating_at = at[good] if any_bad else at
        heating = s.output_pct[heating_at] >= 50.0
        if not (any_bad or jumped.any() or heating.any()):
            return  # no bad reading, no jump, never heating hard: nothing can raise it
        # (Where nothing is bad, every reading is the next good one in a row.)
        bad_row = _in_a_row(bad) if any_bad else np.zeros(at.size, dtype=np.int64)
        good_row = _in_a_row(good) if any_bad else np.arange(1, at.size + 1)
        jumps = np.zeros(at.size, dtype=np.int64)
        if jumped.any():
            prev_good = np.concatenate(([False], good[:-1]))
            prev_t = np.concatenate(([np.nan], t[:-1]))
            jump = good & prev_good & (t - prev_t <= 10.0) & np.concatenate(([False], jumped))
            jumps = np.cumsum(jump) - _first_within(t[jump], t, JUMP_WINDOW_S)
        # Frozen: the same reading as the last good one, heating hard, for FROZEN_S.
        g = np.flatnonzero(good) if any_bad else np.arange(at.size)
        frozen = np.zeros(at.size, dtype=bool)
        if heating.any():
            same = np.concatenate(([False], temp[g][1:] == temp[g][:-1]))
            reset = ~heating | ~same
            since = t[g][np.maximum.accumulate(np.where(reset, np.arange(g.size), 0))]
            frozen[g] = ~reset & (t[g] - since >= FROZEN_S)
        many = good & (jumps >= JUMPS_TO_ALARM)
        on = (bad & (bad_row >= BAD_READINGS_TO_ALARM)) | many | (good & frozen)
        off = good & ~frozen & (good_row >= GOOD_READINGS_TO_CLEAR) & (jumps == 0)
        def words(k: int) -> Said:
            p = int(np.searchsorted(at, k))
            if bad[p]:
                why = "fault" if fault[p] else "impossible" if self.has_temp[k] else "none"
                return rules.bad_reading_words(why, _none(s.chamber_c[k]))
            return rules.jumps_words() if many[p] else rules.frozen_words(float(temp[p]))

        self._alarm("sensor-bad", at[on], at[off], words)

    def counted(self, code: str, over: np.ndarray, clear: np.ndarray,
                words: Callable[[int], Said | str]) -> None:
        """A check that needs HOT_READINGS_TO_ALARM usable readings over a line in a row."""
        at = np.flatnonzero(self.usable)
        hot = over[at]
        if not hot.any():
            return  # never over the line: nothing to raise
        row = _in_a_row(hot)
        on = at[row >= HOT_READINGS_TO_ALARM]
        off = at[~over[at] & clear[at]]
        self._alarm(code, on, off, words)

    def too_hot(self) -> None:
        s, lim, rules = self.s, self.limits, self.rules
        temp = self.temp
        applies = np.isfinite(s.target_c) & np.isin(s.kind, (_RAMP, _HOLD, _PAUSE))
        limit = np.where(np.isfinite(s.target_c), s.target_c, 0.0) + lim.overshoot
        hot = applies & (temp > limit)
        self.counted("too-hot", hot, ~applies | (temp < limit - 2.0),
                     lambda k: rules.too_hot_words(float(temp[k]), float(s.target_c[k])))
        if rules.max_c is not None:
            top = rules.max_c
            self.counted("over-kiln-max", temp > top, temp < top - 5.0,
                         lambda k: rules.over_max_words(float(temp[k])))

    def slow_checks(self) -> None:
        s, lim, rules = self.s, self.limits, self.rules
        at = self.slow[self.usable[self.slow]]  # the slow checks that need a temperature
        t, temp = s.t[at], self.temp[at]
        sp, out = s.setpoint_c[at], s.output_pct[at]
        state = s.state[at]
        # Lagging behind a rated ramp.
        lagging = (s.rated_ramp[at] & np.isfinite(sp)
                   & np.isin(state, (_CODE[st.HEATING], _CODE[st.REACHING])))
        gap = np.where(lagging, sp - temp, 0.0)
        behind = lagging & (gap > lim.behind)
        since = t[_run_start(behind)]
        on = behind & (t - since >= lim.behind_for)
        off = ~behind & (~lagging | (gap < lim.behind * 0.75))
        self._alarm("lagging", at[on], at[off],
                    lambda k: rules.lagging_words(float(self.temp[k]),
                                                  float(s.setpoint_c[k] - self.temp[k]),
                                                  float(s.setpoint_c[k])))
        # No rise at full demand.
        demand = np.where(np.isfinite(out), out >= FULL_OUTPUT_PCT,
                          np.isfinite(sp) & (sp - temp >= lim.behind)) & ~s.heat_off[at]
        since = t[_run_start(demand)]
        ready = demand & (t - since >= lim.stall_for)
        where = self.history.locate(at)
        before = self.history.ago(where, t, lim.stall_for)
        rise = temp - before
        judged = ready & np.isfinite(before)
        on = judged & (rise < NO_RISE_C)
        off = ~demand | (judged & (rise > NO_RISE_C * 2))
        self._alarm("no-rise", at[on], at[off],
                    lambda k: rules.no_rise_words(float(self.temp[k])))
        # Heat stuck on.
        is_off = np.isfinite(out) & (out <= STUCK_OUTPUT_PCT)
        off_since = t[_run_start(is_off)]
        before = self.history.ago(where, t, STUCK_RISE_WINDOW_S)
        rise = temp - before
        has_rise = np.isfinite(before)
        rising_off = is_off & (t - off_since >= STUCK_OFF_FOR_S) & has_rise & (rise >= STUCK_RISE_C)
        top = _sliding_max(np.where(np.isfinite(sp), sp, -np.inf),
                           _first_within(t, t, SETPOINT_LAG_S))
        half = self.history.ago(where, t, STUCK_RISE_WINDOW_S / 2)
        last = self.history.ago(where, t, STUCK_RISE_WINDOW_S / 4)
        steady = (has_rise & np.isfinite(half) & np.isfinite(last)
                  & (half - before >= NO_RISE_C / 2) & (temp - half >= NO_RISE_C / 2)
                  & (temp - last >= NO_RISE_C / 4))
        far_above = (np.isfinite(top) & (temp > top + lim.runaway) & has_rise
                     & (rise >= NO_RISE_C) & steady)
        on = rising_off | far_above
        off = ~on & has_rise & (rise < NO_RISE_C)
        at_on, top_on, off_on = at[on], top[on], rising_off[on]

        def stuck_words(k: int) -> Said:
            p = int(np.searchsorted(at_on, k))
            sp_k = float(top_on[p]) if np.isfinite(top_on[p]) else None
            return rules.stuck_on_words(float(self.temp[k]), bool(off_on[p]), sp_k)

        self._alarm("heat-stuck-on", at[on], at[off], stuck_words)

    def hold_checks(self) -> None:
        s, lim, rules = self.s, self.limits, self.rules
        at = self.slow
        t, state, kind = s.t[at], s.state[at], s.kind[at]
        since_state = s.state_since[at]
        in_hold = kind == _HOLD
        slipped = in_hold & (state == _CODE[st.SLIPPED]) & np.isfinite(since_state)
        on = slipped & (t - since_state >= lim.hold_grace)
        self._alarm("hold-slipped", at[on], at[~slipped],
                    lambda k: rules.slipped_words(float(s.target_c[k]),
                                                  float(s.t[k] - s.state_since[k])))
        started = s.step_started_at[at]
        ramp = kind == _RAMP
        since = np.where(in_hold & (state == _CODE[st.REACHING]), started,
                         np.where(ramp & (state == _CODE[st.HEATING_FULL]), started,
                                  np.where(ramp & (state == _CODE[st.REACHING]), since_state,
                                           np.nan)))
        waiting = np.isfinite(since)
        on = waiting & (t - since >= lim.reach_within)
        self._alarm("never-reached", at[on], at[~waiting],
                    lambda k: rules.never_reached_words(bool(s.kind[k] == _HOLD),
                                                        float(s.target_c[k])))


    def registered(self) -> None:
        """The checks registered in engine/checks have no array form: each check object
        itself judges, one tick at a time, the Observation the arrays make for that tick,
        on the ticks `judge_all` gives it (slow or every tick; with a usable temperature)."""
        checks = self.rules.checks
        if not checks:
            return
        s = self.s
        slow = np.zeros(self.n, dtype=bool)
        slow[self.slow] = True
        names = st.STEP_STATES
        for check in checks:
            ticks = slow | bool(check.every_tick)
            if check.needs_temperature:
                ticks = ticks & self.usable
            on: list[int] = []
            off: list[int] = []
            said: dict[int, str] = {}
            for k in np.flatnonzero(ticks).tolist():
                obs = Observation(
                    float(s.t[k]), bool(s.link_ok[k]), _none(s.chamber_c[k]),
                    bool(s.sensor_fault[k]), _none(s.output_pct[k]), _none(s.setpoint_c[k]),
                    _none(s.target_c[k]), KINDS[s.kind[k]] if s.kind[k] >= 0 else None,
                    names[s.state[k]], _none(s.state_since[k]), _none(s.step_started_at[k]),
                    bool(s.rated_ramp[k]), bool(s.heat_off[k]), None)
                verdict = check.judge(obs, _none(self.temp[k]))
                if verdict is None:
                    continue
                if verdict:
                    on.append(k)
                    said[k] = verdict if isinstance(verdict, str) else check.name
                else:
                    off.append(k)
            self._alarm(check.code, np.asarray(on, dtype=np.int64),
                        np.asarray(off, dtype=np.int64), said.__getitem__)


def _none(value: float) -> float | None:
    return None if value != value else float(value)  # NaN: None


def alarm_events(rules: AlarmRules, seen: Seen) -> Found:
    """Every alarm raised and cleared over the samples, as the per-sample rules would, up to
    and including the first critical one (where the run would have ended)."""
    found = Found()
    if seen.t.size == 0:
        return found
    checks = _Checks(rules, seen)
    checks.link()
    checks.sensor()
    checks.too_hot()
    checks.slow_checks()
    checks.hold_checks()
    checks.registered()
    rank_of = dict(_RANK)
    for k, check in enumerate(rules.checks):  # judged after the built-in ones, in order
        rank_of.setdefault(check.code, len(ORDER) + k)
    t = seen.t
    first: tuple[int, int] | None = None
    for code, pairs in checks.found.items():
        if ALARMS[code][0] == CRITICAL and pairs:  # the run ends at the first critical one
            raised = pairs[0][0]
            if first is None or (raised, rank_of[code]) < first:
                first = (raised, rank_of[code])
    for code, pairs in checks.found.items():
        rank = rank_of[code]
        say = checks.words[code]
        for raised, cleared in pairs:
            if first is not None and raised > first[0]:
                break
            said = say(raised)
            words = said.text(rules.units) if isinstance(said, Said) else said
            found.events.append((raised, rank, raised_event(
                float(t[raised]), code, words, said if isinstance(said, Said) else None)))
            if first is not None and (raised, rank) == first:
                found.critical_words = words
            if cleared is None or (first is not None and cleared > first[0]):
                break
            found.events.append((cleared, rank, cleared_event(float(t[cleared]), code, False)))
    found.first_critical = None if first is None else first[0]
    found.events.sort(key=lambda e: (e[0], e[1]))
    return found
