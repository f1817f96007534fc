"""The report's chart: plan, setpoint, chamber and load against time, alarms marked; inline SVG.

Plain SVG 1.1 (no script, no external font or stylesheet), so it opens in any browser and
parses as XML. Long traces are thinned first, keeping each column's minimum and maximum so
an overshoot never vanishes from the chart (tuikiln.thinning, pure numpy).

The chart has a viewBox and no fixed size: it takes the width of the page (a phone, a wide
screen, a printed sheet) and keeps its proportions. Every series has its own dash as well as
its own colour, and the legend (below the plot, where it hides no reading) draws each dash,
so a black-and-white print or a reader who does not tell red from orange loses nothing.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

from tuikiln.analysis.replay import Replay, clock
from tuikiln.events import Severity
from tuikiln.plan import plan_profile
from tuikiln.thinning import thin
from tuikiln.units import symbol

WIDTH, HEIGHT = 1000, 470
LEFT, RIGHT, TOP, BOTTOM = 64, 20, 28, 78
LEGEND_Y = HEIGHT - 14
SERIES = (  # name, colour, dash (SVG stroke-dasharray; "" is solid), stroke width
    ("plan", "#8a8a8a", "9 5", 1.6),
    ("setpoint", "#2f6db5", "2 3", 1.6),
    ("chamber", "#c8382b", "", 1.8),
    ("load", "#e08a00", "12 3 3 3", 1.6),
)


def _shown(celsius: np.ndarray | float, units: str) -> np.ndarray:
    """°C to the display unit for arrays (tuikiln.units.from_c takes one value)."""
    values = np.asarray(celsius, dtype=float)
    return values * 1.8 + 32.0 if units == "F" else values


def _nice_step(span: float, count: int) -> float:
    raw = span / max(1, count)
    power = 10.0 ** math.floor(math.log10(raw)) if raw > 0 else 1.0
    for m in (1.0, 2.0, 2.5, 5.0, 10.0):
        if raw <= m * power:
            return m * power
    return 10.0 * power


def _dash(dash: str) -> str:
    return f' stroke-dasharray="{dash}"' if dash else ""


def _path(x: np.ndarray, y: np.ndarray) -> str:
    """An SVG path through the points, broken where a value is missing."""
    parts: list[str] = []
    pen_down = False
    for xi, yi in zip(x.tolist(), y.tolist(), strict=True):
        if not (math.isfinite(xi) and math.isfinite(yi)):
            pen_down = False
            continue
        parts.append(f"{'L' if pen_down else 'M'}{xi:.1f},{yi:.1f}")
        pen_down = True
    return " ".join(parts)


def chart_svg(result: Replay) -> str:
    trace = result.trace
    units = result.units
    t_h = (trace.t - trace.start_t) / 3600.0
    plot_w = WIDTH - LEFT - RIGHT
    plot_h = HEIGHT - TOP - BOTTOM
    series: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    start_c = float(trace.chamber_c[np.isfinite(trace.chamber_c)][0]) if np.isfinite(
        trace.chamber_c).any() else 20.0
    plan = plan_profile(result.profile, start_c=start_c)
    series["plan"] = (plan.times_s / 3600.0, plan.setpoints_c)
    setpoint = trace.setpoint_c
    if result.rerun is not None and not np.isfinite(setpoint).any():
        setpoint = result.rerun.setpoint_c
    for name, values in (("setpoint", setpoint), ("chamber", trace.chamber_c),
                         ("load", trace.load_c)):
        if np.isfinite(values).any():
            series[name] = thin(t_h, values, plot_w)
    end_h = max(float(t_h[-1]) if t_h.size else 1.0, 1e-3)
    all_y = np.concatenate([v[np.isfinite(v)] for _, v in series.values()] or [np.array([0.0])])
    lo_c, hi_c = float(all_y.min()), float(all_y.max())
    lo, hi = float(_shown(lo_c, units)), float(_shown(hi_c, units))
    y_step = _nice_step(max(hi - lo, 10.0), 6)
    lo = math.floor(lo / y_step) * y_step
    hi = math.ceil(hi / y_step) * y_step + (y_step if hi - lo < y_step else 0.0)
    x_step = _nice_step(end_h, 10)

    def sx(hours: np.ndarray | float) -> np.ndarray:
        return LEFT + np.asarray(hours, dtype=float) / end_h * plot_w

    def sy(celsius: np.ndarray | float) -> np.ndarray:
        shown = _shown(np.asarray(celsius, dtype=float), units)
        return TOP + (hi - shown) / (hi - lo) * plot_h

    out: list[str] = [
        # No pixel size: the viewBox gives the proportions, the page the width.
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" '
        'width="100%" preserveAspectRatio="xMidYMid meet" class="chart" role="img" '
        'font-family="sans-serif" font-size="12">',
        f"<title>{escape(result.profile.name)}: plan and actual</title>",
        f'<rect x="0" y="0" width="{WIDTH}" height="{HEIGHT}" fill="#ffffff"/>',
    ]
    # Step bands, alternately shaded, numbered at the top.
    for s in result.steps:
        if s.start_s is None:
            continue
        end_s = s.end_s if s.end_s is not None else end_h * 3600.0
        x0, x1 = float(sx(s.start_s / 3600.0)), float(sx(end_s / 3600.0))
        fill = "#f4f6f9" if s.index % 2 == 0 else "#ffffff"
        colour = {"missed": "#fbe3e1", "met with remarks": "#fff4d6"}.get(s.verdict, fill)
        out.append(f'<rect x="{x0:.1f}" y="{TOP}" width="{max(0.0, x1 - x0):.1f}" '
                   f'height="{plot_h}" fill="{colour}"><title>{escape(s.title(units))}: '
                   f"{escape(s.verdict)}</title></rect>")
        if x1 - x0 >= 14:
            out.append(f'<text x="{(x0 + x1) / 2:.1f}" y="{TOP - 8}" text-anchor="middle" '
                       f'fill="#555">{s.index + 1}</text>')
    # Grid and axes.
    value = lo
    while value <= hi + 1e-9:
        y = TOP + (hi - value) / (hi - lo) * plot_h
        out.append(f'<line x1="{LEFT}" y1="{y:.1f}" x2="{WIDTH - RIGHT}" y2="{y:.1f}" '
                   'stroke="#dddddd"/>')
        out.append(f'<text x="{LEFT - 6}" y="{y + 4:.1f}" text-anchor="end">{value:g}</text>')
        value += y_step
    hour = 0.0
    while hour <= end_h + 1e-9:
        x = float(sx(hour))
        out.append(f'<line x1="{x:.1f}" y1="{TOP + plot_h}" x2="{x:.1f}" '
                   f'y2="{TOP + plot_h + 5}" stroke="#444"/>')
        out.append(f'<text x="{x:.1f}" y="{TOP + plot_h + 18}" text-anchor="middle">'
                   f"{hour:g}</text>")
        hour += x_step
    out.append(f'<rect x="{LEFT}" y="{TOP}" width="{plot_w}" height="{plot_h}" fill="none" '
               'stroke="#444"/>')
    out.append(f'<text x="{LEFT + plot_w / 2:.0f}" y="{TOP + plot_h + 36}" '
               'text-anchor="middle">hours from the start</text>')
    out.append(f'<text x="14" y="{TOP + plot_h / 2:.0f}" text-anchor="middle" '
               f'transform="rotate(-90 14 {TOP + plot_h / 2:.0f})">{escape(symbol(units))}</text>')
    # The series; the plan last, dashed on top, so it shows where the setpoint follows it.
    for name, colour, dash, width in SERIES[1:] + SERIES[:1]:
        if name not in series:
            continue
        series_h, series_c = series[name]
        out.append(f'<path d="{_path(sx(series_h), sy(series_c))}" fill="none" '
                   f'stroke="{colour}" stroke-width="{width}"{_dash(dash)} '
                   f'class="series-{name}"><title>{name}</title></path>')
    # Alarms: a line and a marker where each was raised.
    for alarm in result.alarms:
        hours = (alarm.raised_t - trace.start_t) / 3600.0
        if not 0.0 <= hours <= end_h:
            continue
        x = float(sx(hours))
        colour = "#b00020" if alarm.severity == Severity.CRITICAL else "#d97700"
        words = escape(f"{clock(alarm.raised_t - trace.start_t)} {alarm.words}")
        out.append(f'<g><title>{words}</title><line x1="{x:.1f}" y1="{TOP}" x2="{x:.1f}" '
                   f'y2="{TOP + plot_h}" stroke="{colour}" stroke-dasharray="3 3"/>'
                   f'<polygon points="{x - 6:.1f},{TOP + plot_h + 1} {x + 6:.1f},'
                   f'{TOP + plot_h + 1} {x:.1f},{TOP + plot_h - 10}" fill="{colour}"/></g>')
    # Legend: each series' own dash, long enough to show its pattern twice or more.
    lx, ly = LEFT, LEGEND_Y
    out.append('<g class="legend">')
    for name, colour, dash, width in SERIES:
        if name not in series:
            continue
        out.append(f'<line x1="{lx}" y1="{ly - 4}" x2="{lx + 48}" y2="{ly - 4}" '
                   f'stroke="{colour}" stroke-width="{width + 0.6:g}"{_dash(dash)}/>')
        out.append(f'<text x="{lx + 54}" y="{ly}">{name}</text>')
        lx += 140
    if result.alarms:
        out.append(f'<polygon points="{lx},{ly + 1} {lx + 12},{ly + 1} {lx + 6},{ly - 10}" '
                   'fill="#d97700"/>')
        out.append(f'<text x="{lx + 17}" y="{ly}">alarm</text>')
    out.append("</g>")
    out.append("</svg>")
    return "\n".join(out)
