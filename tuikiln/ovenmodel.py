"""The oven learned from a logged run with heating and cooling: a chamber and its lining.

    model = identify(t_s, chamber_c, output_pct)     # any run with heating and free cooling
    model.top_c                                       # the highest it can hold at full output
    model.fopdt(850.0)                                # first order plus dead time around 850 °C
    model.rate_c_per_s(700.0, lining_c, 1.0)          # how fast it heats there at full output

The model, the chamber temperature T with one hidden lining temperature W:

    dT/dt = a*u - b*(T - Ta) - c*((T + 273.15)^4 - (Ta + 273.15)^4) - d*(T - W)
    dW/dt = (T - W) / tau_w

`u` is the heater output as a fraction 0..1 delayed by the dead time, `a` the heating rate at
full output (°C/s: heater power over the chamber's effective heat capacity), `b` conduction
through the lining and casing to the room (1/s), `c` radiation and leaks through gaps
(1/(s·K³)): the loss that grows faster than linearly, so the model extrapolates above the
temperatures the run reached. `d` and `tau_w` are the lining soaking up heat: a cold lining
takes heat from the chamber for hours (tau_w), a hot one gives it back while the oven cools.
Without it a one-node fit of a short run takes that soaking for loss, and promises a top
temperature the oven passes (measured on the simulator: 980 instead of 1260 °C); with d = 0
the model is exactly the one-node law above.

How it is found (and why these methods):

- The log is put on an even grid by averaging into bins (a time-proportioned output of an SSR
  averages to its duty; a plain interpolation would pick on/off at random).
- dT/dt is a filtered derivative: the least-squares slope over a centred window (the
  Savitzky-Golay derivative of order 1 or 2, which share their weights). Temperature and
  output are smoothed with the same window so every term of the fit sees the same stretch
  of time. A centred window adds no lag, so the dead time is not biased by the filter.
- For a given tau_w, W is the logged temperature through a first-order filter, and the
  equation is linear in a, b, c, d: linear least squares. A negative coefficient is not
  physical: it is dropped and the rest fitted again (a small active set). tau_w itself is a
  scan over a log-spaced grid (10 min to 20 h), keeping the smallest residual.
- The dead time is a scan of lags. Where the output steps up from off (a run's start, the
  heat coming back after a pause) the rise over the next minutes is fitted against the
  heat that had arrived with each lag of 0 to 5 min, second by second, and the lag that
  fits best is kept: a closed loop's slowly moving output hides a delay of seconds from the
  whole-run fit, a step shows it. Logs too coarse for that (over 10 s a row) fall back to a
  scan of lags in the whole-run fit. A scan is robust where a gradient search on the lag is
  not (the residual is not smooth in it).
- Fit quality is the RMS of the derivative residual (°C/min) and of the simulated residual
  (°C): the model run open-loop on the logged output from the first reading, which is the
  honest figure for predicting a whole run.

A later run refines the model by adding its normal equations (X'X, X'y, y'y per tau_w of the
grid) to the stored ones: the same as one fit over both runs, without keeping the samples.

Around an operating temperature T0 (lining soaked through, W = T0) the model is linearised
into first order plus dead time for the SIMC rules (tuikiln.simc): the time constant is the
chamber's own, tau = 1/(L'(T0) + d), and the gain k = a*tau/100 °C per % output, so that
k/tau is the initial slope a/100 exactly. The lining's slow mode is left out: for a
lag-dominant loop SIMC's settings depend only on k/tau and the dead time (Skogestad 2003,
the integrating-process approximation for tau > 8*theta), and that slope is what a fit of a
heat-up measures best. The steady-state gain (a/(100*L')) is reported beside it.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass, replace
from typing import Any

import numpy as np

KELVIN = 273.15
MODEL_VERSION = 1
HEATING_OUTPUT_PCT = 50.0
"""A run has heating when the output stayed at least this high for a while."""
MIN_HEATING_S = 300.0
MIN_COOLING_S = 600.0
MIN_COOLING_DROP_C = 30.0
MAX_DEAD_TIME_S = 300.0
WINDOW_S = 120.0
"""Width of the derivative's window: long enough to average SSR cycling and noise of a few
tenths of a degree, short against the minutes a heat-up or a cool takes."""
LINING_TAUS_S = (600.0, 1200.0, 2400.0, 4800.0, 9600.0, 19200.0, 38400.0, 72000.0)
STEP_WINDOW_S = 300.0
_RAD_SCALE = 1e9  # K^4 differences are ~1e11: keeps the normal equations well conditioned


class ModelError(ValueError):
    """A run that cannot teach the model anything; the message is for the user."""


@dataclass(frozen=True)
class Fopdt:
    """First order plus dead time around `at_c`: gain °C per % output, seconds."""

    gain_c_per_pct: float
    tau_s: float
    dead_time_s: float
    at_c: float
    output_pct: float
    """The output that holds `at_c` once the lining has soaked through."""
    steady_gain_c_per_pct: float


@dataclass(frozen=True)
class Normals:
    """One tau_w's least-squares sums, so that later runs can be added."""

    lining_tau_s: float
    gram: tuple[tuple[float, ...], ...]
    moment: tuple[float, ...]
    yy: float
    n: int


@dataclass(frozen=True)
class OvenModel:
    heat_c_per_s: float
    """a: heating rate at full output with no losses, °C/s."""
    loss_per_s: float
    """b: conduction loss coefficient to the room, 1/s."""
    radiation_per_s_k3: float
    """c: radiation and leak coefficient, 1/(s·K³)."""
    lining_per_s: float
    """d: heat into the lining while it is colder than the chamber, 1/s."""
    lining_tau_s: float
    room_c: float
    dead_time_s: float
    rms_c_per_min: float
    """RMS of the derivative residual, °C/min."""
    sim_rms_c: float
    """RMS of the simulated (open-loop) residual over the learning run(s), °C."""
    valid_from_c: float
    valid_to_c: float
    seconds: float
    """Seconds of log the model was learned from."""
    runs: int = 1
    operating_c: float | None = None
    """Where the run spent its controlled time: the default point of the FOPDT model."""
    normals: tuple[Normals, ...] = ()
    sources: tuple[str, ...] = ()
    """A fingerprint of each log learned from: the same run is never counted twice."""

    # ----- the physics -----

    def loss_c_per_s(self, temp_c: float | np.ndarray, lining_c: float | np.ndarray | None = None
                     ) -> float | np.ndarray:
        """How fast the oven cools at `temp_c` with the heater off, °C/s (lining soaked
        through when `lining_c` is not given)."""
        t = np.asarray(temp_c, dtype=float)
        tk, rk = t + KELVIN, self.room_c + KELVIN
        out = self.loss_per_s * (tk - rk) + self.radiation_per_s_k3 * (tk**4 - rk**4)
        if lining_c is not None:
            out = out + self.lining_per_s * (t - np.asarray(lining_c, dtype=float))
        return float(out) if np.ndim(out) == 0 else out

    def rate_c_per_s(self, temp_c: float, lining_c: float | None, output: float) -> float:
        """dT/dt at `temp_c` with the lining at `lining_c` and the output 0..1."""
        return self.heat_c_per_s * output - float(self.loss_c_per_s(temp_c, lining_c))

    def loss_slope_per_s(self, temp_c: float) -> float:
        """dL/dT at `temp_c` with the lining soaked through, 1/s."""
        tk = temp_c + KELVIN
        return self.loss_per_s + 4.0 * self.radiation_per_s_k3 * tk**3

    def holding_output_pct(self, temp_c: float) -> float:
        """The output that holds `temp_c` once the lining has soaked through, %
        (above 100: out of reach)."""
        return 100.0 * float(self.loss_c_per_s(temp_c)) / self.heat_c_per_s

    @property
    def top_c(self) -> float:
        """The temperature full output holds in the end: the highest the oven can reach."""
        lo, hi = self.room_c, self.room_c + 1.0
        while float(self.loss_c_per_s(hi)) < self.heat_c_per_s:
            lo, hi = hi, self.room_c + 2.0 * (hi - self.room_c)
            if hi > 1e5:
                return math.inf
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            if float(self.loss_c_per_s(mid)) < self.heat_c_per_s:
                lo = mid
            else:
                hi = mid
        return lo

    def fopdt(self, at_c: float | None = None) -> Fopdt:
        """First order plus dead time around `at_c` (default: the run's operating point)."""
        at = self.operating_c if at_c is None else at_c
        if at is None:
            at = self.room_c + 0.7 * (self.valid_to_c - self.room_c)
        slope = self.loss_slope_per_s(at)
        tau = 1.0 / (slope + self.lining_per_s)
        return Fopdt(self.heat_c_per_s * tau / 100.0, tau, self.dead_time_s, at,
                     self.holding_output_pct(at), self.heat_c_per_s / (100.0 * slope))

    def simulate(self, t_s: np.ndarray, output_pct: np.ndarray, start_c: float) -> np.ndarray:
        """The chamber open-loop on a logged output (delayed by the dead time), from an oven
        soaked at start_c."""
        t = np.asarray(t_s, dtype=float)
        u = np.interp(t - self.dead_time_s, t, np.asarray(output_pct, dtype=float) / 100.0)
        out = np.empty_like(t)
        temp = lining = start_c
        out[0] = temp
        for i in range(1, t.size):
            h = t[i] - t[i - 1]
            # Sub-steps keep explicit Euler well inside its stable range (1/L' is minutes).
            n = max(1, int(math.ceil(h / 5.0)))
            dh = h / n
            for _ in range(n):
                rate = self.rate_c_per_s(temp, lining, float(u[i - 1]))
                lining += dh * (temp - lining) / self.lining_tau_s
                temp += dh * rate
            out[i] = temp
        return out

    # ----- storage -----

    def as_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["normals"] = [asdict(n) for n in self.normals]
        d["version"] = MODEL_VERSION
        return d

    def summary(self) -> dict[str, Any]:
        """The figures a person or a script wants (`learn --json`'s "model")."""
        f = self.fopdt()
        return {
            "heat_c_per_s": _r(self.heat_c_per_s, 5),
            "heat_c_per_h": _r(self.heat_c_per_s * 3600.0, 1),
            "loss_per_s": _r(self.loss_per_s, 9),
            "radiation_per_s_k3": _r(self.radiation_per_s_k3, 18),
            "lining_per_s": _r(self.lining_per_s, 7),
            "lining_tau_s": _r(self.lining_tau_s, 0),
            "room_c": _r(self.room_c, 2),
            "top_c": _r(self.top_c, 1),
            "tau_s": _r(f.tau_s, 1),
            "gain_c_per_pct": _r(f.gain_c_per_pct, 4),
            "steady_gain_c_per_pct": _r(f.steady_gain_c_per_pct, 4),
            "dead_time_s": _r(self.dead_time_s, 1),
            "operating_c": _r(f.at_c, 1),
            "holding_output_pct": _r(f.output_pct, 1),
            "rms_c_per_min": _r(self.rms_c_per_min, 4),
            "sim_rms_c": _r(self.sim_rms_c, 2),
            "valid_from_c": _r(self.valid_from_c, 1),
            "valid_to_c": _r(self.valid_to_c, 1),
            "seconds": _r(self.seconds, 0),
            "runs": self.runs,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> OvenModel:
        """The stored form back; ValueError (plain words) for anything else."""
        if not isinstance(d, Mapping) or d.get("version") != MODEL_VERSION:
            raise ValueError("not an oven model saved by this version of tuikiln")
        try:
            values: dict[str, Any] = {}
            for name in _FIELDS:
                if name not in d or name in ("normals", "sources"):
                    continue
                value = d[name]
                if name == "operating_c" and value is None:
                    values[name] = None
                elif isinstance(value, bool) or not isinstance(value, int | float):
                    raise ValueError(f'"{name}" is not a number')
                else:
                    values[name] = int(value) if name == "runs" else float(value)
            values["sources"] = tuple(str(x) for x in d.get("sources", ()))
            normals = tuple(
                Normals(float(n["lining_tau_s"]),
                        tuple(tuple(float(x) for x in row) for row in n["gram"]),
                        tuple(float(x) for x in n["moment"]), float(n["yy"]), int(n["n"]))
                for n in d.get("normals", ()))
            if any(len(n.gram) != 4 or any(len(row) != 4 for row in n.gram)
                   or len(n.moment) != 4 for n in normals):
                raise ValueError("its least-squares sums have the wrong shape")
            model = cls(**values, normals=normals)
        except (TypeError, ValueError, KeyError) as exc:
            raise ValueError(f"the oven model is damaged ({exc})") from None
        numbers = [getattr(model, f) for f in _FIELDS if isinstance(getattr(model, f), float)]
        if not all(math.isfinite(x) for x in numbers) \
                or model.heat_c_per_s <= 0 or model.loss_per_s < 0 or model.lining_tau_s <= 0 \
                or model.radiation_per_s_k3 < 0 or model.lining_per_s < 0 \
                or model.dead_time_s < 0:
            raise ValueError("the oven model holds numbers no oven has")
        return model


_FIELDS = tuple(OvenModel.__dataclass_fields__)


def _r(x: float | None, digits: int) -> float | None:
    if x is None or not math.isfinite(x):
        return None
    return round(float(x), digits)


# ----- identification -----


@dataclass(frozen=True)
class _Grid:
    t: np.ndarray
    temp: np.ndarray
    out: np.ndarray
    h: float


def _grid(t_s: np.ndarray, temp_c: np.ndarray, out_pct: np.ndarray) -> _Grid:
    ok = np.isfinite(t_s) & np.isfinite(temp_c) & np.isfinite(out_pct)
    t, temp, out = t_s[ok], temp_c[ok], out_pct[ok]
    if t.size < 10:
        raise ModelError("the run has too few readings with both temperature and output")
    order = np.argsort(t, kind="stable")
    t, temp, out = t[order], temp[order], out[order]
    h = max(5.0, float(np.median(np.diff(t))))
    index = np.floor((t - t[0]) / h).astype(np.int64)
    n = int(index[-1]) + 1
    count = np.bincount(index, minlength=n).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        temp_bin = np.bincount(index, temp, minlength=n) / count
        out_bin = np.bincount(index, out, minlength=n) / count
    return _Grid(t[0] + (np.arange(n) + 0.5) * h, temp_bin, out_bin, h)


def _window(values: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """Correlate with a centred kernel; NaN where the window is not whole (or has a gap)."""
    m = kernel.size // 2
    out = np.full(values.size, np.nan)
    if values.size > 2 * m:
        out[m:values.size - m] = np.convolve(values, kernel[::-1], mode="valid")
    return out


def _lowpass(values: np.ndarray, h: float, tau: float) -> np.ndarray:
    """First-order filter (exact for a held input), starting soaked at the first value; gaps
    hold the filter where it was."""
    k = 1.0 - math.exp(-h / tau)
    out = np.empty(values.size)
    w = float(values[0]) if math.isfinite(values[0]) else 0.0
    for i, v in enumerate(values.tolist()):
        out[i] = w
        if v == v:  # not NaN
            w += k * (v - w)
    return out


@dataclass(frozen=True)
class _Smoothed:
    dtdt: np.ndarray
    temp: np.ndarray
    out: np.ndarray
    lining: dict[float, np.ndarray]


def _smooth(grid: _Grid) -> _Smoothed:
    m = max(2, int(round(0.5 * WINDOW_S / grid.h)))
    offsets = np.arange(-m, m + 1, dtype=float)
    slope_kernel = offsets / (grid.h * float(np.sum(offsets**2)))
    mean_kernel = np.full(offsets.size, 1.0 / offsets.size)
    lining = {tau: _window(_lowpass(grid.temp, grid.h, tau), mean_kernel)
              for tau in LINING_TAUS_S}
    return _Smoothed(_window(grid.temp, slope_kernel), _window(grid.temp, mean_kernel),
                     _window(grid.out, mean_kernel) / 100.0, lining)


def _regressors(s: _Smoothed, room_c: float, tau: float, lag_bins: int = 0
                ) -> tuple[np.ndarray, np.ndarray]:
    out = s.out
    if lag_bins:
        out = np.concatenate([np.full(lag_bins, np.nan), out[:-lag_bins]])
    temp = s.temp
    tk, rk = temp + KELVIN, room_c + KELVIN
    x = np.column_stack([out, -(temp - room_c), -(tk**4 - rk**4) / _RAD_SCALE,
                         -(temp - s.lining[tau])])
    ok = np.isfinite(s.dtdt) & np.all(np.isfinite(x), axis=1)
    return x[ok], s.dtdt[ok]


def _solve(gram: np.ndarray, moment: np.ndarray) -> np.ndarray:
    """Least squares from the normal equations with every loss coefficient kept at zero or
    above (a small active set: drop the most negative one, solve again)."""
    active = list(range(gram.shape[0]))
    full = np.zeros(gram.shape[0])
    for _ in range(gram.shape[0]):
        sub = np.ix_(active, active)
        coef = np.linalg.lstsq(gram[sub], moment[active], rcond=None)[0]
        full = np.zeros(gram.shape[0])
        full[active] = coef
        negative = [i for i in active if i != 0 and full[i] < 0.0]
        if not negative:
            return full
        active.remove(min(negative, key=lambda i: full[i]))
    return full


def _residual(n: Normals, coef: np.ndarray) -> float:
    g, m = np.array(n.gram), np.array(n.moment)
    return float(n.yy - 2.0 * coef @ m + coef @ g @ coef)


def _best(normals: tuple[Normals, ...]) -> tuple[Normals, np.ndarray, float]:
    best: tuple[Normals, np.ndarray, float] | None = None
    for n in normals:
        coef = _solve(np.array(n.gram), np.array(n.moment))
        ss = _residual(n, coef)
        if best is None or ss < best[2]:
            best = (n, coef, ss)
    assert best is not None
    return best


def _check_run(grid: _Grid) -> None:
    out, temp, h = grid.out, grid.temp, grid.h
    heating = np.nansum(out >= HEATING_OUTPUT_PCT) * h
    rise = np.nanmax(temp) - np.nanmin(temp[: max(1, temp.size // 2)])
    if heating < MIN_HEATING_S or rise < MIN_COOLING_DROP_C:
        raise ModelError("the run has no heating: the output never stayed above "
                         f"{HEATING_OUTPUT_PCT:.0f} % for {MIN_HEATING_S / 60:.0f} minutes "
                         "while the oven warmed")
    peak = int(np.nanargmax(temp))
    after = (out[peak:] <= 1.0) & np.isfinite(temp[peak:])
    drop = (temp[peak] - np.nanmin(np.where(after, temp[peak:], np.nan))
            if after.any() else 0.0)
    if after.sum() * h < MIN_COOLING_S or not drop >= MIN_COOLING_DROP_C:
        raise ModelError(f"the run has no cooling: the heater must be off for "
                         f"{MIN_COOLING_S / 60:.0f} minutes while the oven falls at least "
                         f"{MIN_COOLING_DROP_C:.0f} °C (end the run with a free cool)")


def identify(t_s: np.ndarray, chamber_c: np.ndarray, output_pct: np.ndarray | None, *,
             room_c: float | None = None) -> OvenModel:
    """Learn the model from one run; ModelError (plain words) when the run cannot tell."""
    if output_pct is None or not np.isfinite(np.asarray(output_pct, dtype=float)).any():
        raise ModelError("the run has no heater output: a model needs the output column "
                         "(the controller's output %, logged by tuikiln or a CSV column)")
    t = np.asarray(t_s, dtype=float)
    temp = np.asarray(chamber_c, dtype=float)
    out = np.asarray(output_pct, dtype=float)
    grid = _grid(t, temp, out)
    _check_run(grid)
    if room_c is None:
        room_c = float(np.nanmin(grid.temp[: max(3, grid.temp.size // 20)]))
    smoothed = _smooth(grid)
    normals = []
    for tau in LINING_TAUS_S:
        x, y = _regressors(smoothed, room_c, tau)
        if y.size < 20:
            raise ModelError("the run is too short to learn from (a few minutes of readings)")
        normals.append(Normals(tau, tuple(tuple(float(v) for v in row) for row in x.T @ x),
                               tuple(float(v) for v in x.T @ y), float(y @ y), int(y.size)))
    chosen, coef, ss = _best(tuple(normals))
    if coef[0] <= 0.0:
        raise ModelError("the run does not show the heater heating the oven "
                         "(more output did not mean faster heating)")
    dead = _step_dead_time_s(t, temp, out, coef, room_c)
    if dead is None:
        dead = _lag_scan_s(smoothed, room_c, chosen.lining_tau_s, grid.h)
    temp_ok = grid.temp[np.isfinite(grid.temp)]
    controlled = (grid.out > 5.0) & (grid.out < 95.0) & np.isfinite(grid.temp)
    operating = (float(np.median(grid.temp[controlled])) if controlled.sum() * grid.h > 600
                 else None)
    model = _from_coef(coef, chosen.lining_tau_s, room_c, dead, ss, chosen.n,
                       valid=(float(temp_ok.min()), float(temp_ok.max())),
                       seconds=chosen.n * grid.h, runs=1, operating=operating,
                       normals=tuple(normals), sim_rms=0.0)
    ok = np.isfinite(grid.temp) & np.isfinite(grid.out)
    simulated = model.simulate(grid.t[ok], grid.out[ok], float(grid.temp[ok][0]))
    return replace(model, sim_rms_c=float(np.sqrt(np.mean((simulated - grid.temp[ok]) ** 2))),
                   sources=(fingerprint(grid),))


def fingerprint(grid: _Grid) -> str:
    """The binned log's digest: the same run, from the run log or its CSV export, gives
    the same one (to the tenth of a degree the readings are logged at)."""
    digest = hashlib.sha256()
    digest.update(np.round(grid.t - grid.t[0]).astype(np.int64).tobytes())
    digest.update(np.nan_to_num(np.round(grid.temp, 0)).astype(np.int64).tobytes())
    return digest.hexdigest()[:16]


def _from_coef(coef: np.ndarray, tau: float, room_c: float, dead: float, ss: float, n: int, *,
               valid: tuple[float, float], seconds: float, runs: int,
               operating: float | None, normals: tuple[Normals, ...], sim_rms: float,
               sources: tuple[str, ...] = ()) -> OvenModel:
    return OvenModel(
        heat_c_per_s=float(coef[0]), loss_per_s=float(coef[1]),
        radiation_per_s_k3=float(coef[2]) / _RAD_SCALE, lining_per_s=float(coef[3]),
        lining_tau_s=tau, room_c=room_c, dead_time_s=dead,
        rms_c_per_min=math.sqrt(max(ss, 0.0) / max(n, 1)) * 60.0, sim_rms_c=sim_rms,
        valid_from_c=valid[0], valid_to_c=valid[1], seconds=seconds, runs=runs,
        operating_c=operating, normals=normals, sources=sources)


def _lag_scan_s(s: _Smoothed, room_c: float, tau: float, h: float) -> float:
    """The whole-run fit's best lag (for logs too coarse to show a step's delay)."""
    best = (math.inf, 0)
    for lag in range(0, int(MAX_DEAD_TIME_S / h) + 1):
        x, y = _regressors(s, room_c, tau, lag)
        if y.size < 20:
            break
        coef = _solve(x.T @ x, x.T @ y)
        ss = float(np.mean((y - x @ coef) ** 2))
        if ss < best[0]:
            best = (ss, lag)
    return best[1] * h


def _step_dead_time_s(t: np.ndarray, temp: np.ndarray, out: np.ndarray, coef: np.ndarray,
                      room_c: float) -> float | None:
    """The lag that best explains the rise after the output steps up from off; None when
    the log has no such step (or is too coarse to show one)."""
    ok = np.isfinite(t) & np.isfinite(temp) & np.isfinite(out)
    t, temp, out = t[ok], temp[ok], out[ok]
    if t.size < 30:
        return None
    step = float(np.median(np.diff(t)))
    if not 0 < step <= 10.0:
        return None
    onsets = np.flatnonzero((out[1:] >= HEATING_OUTPUT_PCT) & (out[:-1] <= 1.0)) + 1
    lags = np.arange(0.0, MAX_DEAD_TIME_S + step / 2, step)
    b, c = float(coef[1]), float(coef[2]) / _RAD_SCALE
    rk = room_c + KELVIN
    found: list[float] = []
    for i in onsets[:5]:
        end = int(np.searchsorted(t, t[i] + STEP_WINDOW_S))
        tw, yw = t[i - 1:end], temp[i - 1:end]
        if tw.size < 30 or float(yw[-1] - yw[0]) < 5.0:
            continue
        before = max(0, i - 1 - int(MAX_DEAD_TIME_S / step))
        t_all, u_all = t[before:end], out[before:end] / 100.0
        dt = np.diff(tw, prepend=tw[0])
        tk = yw + KELVIN
        # What the losses took away: small near room, not small when the heat comes back
        # after a pause at temperature. (The lining term is left out: over five minutes
        # the lining has hardly moved, and its share is fitted into the slope below.)
        target = yw + np.cumsum(dt * (b * (yw - room_c) + c * (tk**4 - rk**4)))
        # For each lag the heat that had arrived, the integral of u(t - lag); the rise is
        # fitted against it with its own offset and slope (the whole-run a is learned
        # over hours, the first minutes can differ).
        heat = np.cumsum(dt * np.array([np.interp(tw - lag, t_all, u_all, left=0.0)
                                        for lag in lags]), axis=1)
        residual = np.full(lags.size, np.inf)
        for k in range(lags.size):
            design = np.column_stack([np.ones(tw.size), heat[k]])
            fit, ss, *_ = np.linalg.lstsq(design, target, rcond=None)
            if ss.size and fit[1] > 0:
                residual[k] = float(ss[0])
        if np.isfinite(residual).any():
            found.append(float(lags[int(np.argmin(residual))]))
    return float(np.median(found)) if found else None


def refine(earlier: OvenModel, new: OvenModel) -> OvenModel:
    """One model from two: a fit over both runs (their normal equations added per tau_w);
    the dead time and the simulated residual weighted by the seconds each was learned from."""
    if set(new.sources) <= set(earlier.sources):
        return earlier  # learned from this very log already
    if not earlier.normals or not new.normals or \
            [n.lining_tau_s for n in earlier.normals] != [n.lining_tau_s for n in new.normals]:
        return new
    summed = tuple(
        Normals(a.lining_tau_s,
                tuple(tuple(x + y for x, y in zip(ra, rb, strict=True))
                      for ra, rb in zip(a.gram, b.gram, strict=True)),
                tuple(x + y for x, y in zip(a.moment, b.moment, strict=True)),
                a.yy + b.yy, a.n + b.n)
        for a, b in zip(earlier.normals, new.normals, strict=True))
    chosen, coef, ss = _best(summed)
    if coef[0] <= 0.0:
        return new
    w1, w2 = earlier.seconds, new.seconds

    def mix(x: float, y: float) -> float:
        return (x * w1 + y * w2) / (w1 + w2)

    ops = [m.operating_c for m in (earlier, new) if m.operating_c is not None]
    return _from_coef(
        coef, chosen.lining_tau_s, mix(earlier.room_c, new.room_c),
        mix(earlier.dead_time_s, new.dead_time_s), ss, chosen.n,
        valid=(min(earlier.valid_from_c, new.valid_from_c),
               max(earlier.valid_to_c, new.valid_to_c)),
        seconds=w1 + w2, runs=earlier.runs + new.runs, operating=ops[-1] if ops else None,
        normals=summed, sim_rms=math.sqrt(mix(earlier.sim_rms_c**2, new.sim_rms_c**2)),
        sources=tuple(dict.fromkeys(earlier.sources + new.sources)))
