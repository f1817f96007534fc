"""A replay in words: the terminal table, a Markdown report and an HTML report with its chart.

Every output ends with the safety line. The HTML is one self-contained file: inline CSS and
SVG, no script, no external asset.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import UTC, datetime
from html import escape
from typing import Any

from tuikiln.analysis.replay import MET, MISSED, NOT_YET, UNDER_WAY, Replay, StepResult, clock
from tuikiln.analysis.whatif import AlarmChange
from tuikiln.limits import LIMIT_KEYS
from tuikiln.plan import load_words
from tuikiln.profile import Load, describe_step
from tuikiln.units import Units, delta_from_c, format_duration, format_rate, format_temp, symbol

SAFETY = ("tuikiln is not a safety device: the oven needs an independent over-temperature "
          "limit.")
QUENCH_CAUTION = ("Quench oil is a fire hazard: a lid within reach, no water near it, and a "
                  "fire extinguisher for oil fires.")
C_NOTE = "C depends on the steel"


# ----- figures in words -----


def _d(kelvin: float | None, units: Units) -> str:
    if kelvin is None:
        return "--"
    return f"{delta_from_c(kelvin, units):.0f} {symbol(units)}"


def step_figures(s: StepResult, units: Units) -> list[str]:
    """Short phrases with the step's figures, for a table cell."""
    f = s.figures
    out: list[str] = []
    if s.start_s is None:
        return out
    duration = f.get("duration_s")
    if s.kind in ("ramp", "cool"):
        planned = f.get("planned_s")
        took = (f"took {format_duration(duration)}" if duration is not None or
                s.verdict != UNDER_WAY else "still going")
        if planned is not None:
            took += f" (planned {format_duration(planned)})"
        out.append(took)
        if f.get("achieved_rate_c_per_h") is not None:
            rate = f"{format_rate(f['achieved_rate_c_per_h'] / 3600.0, units)} achieved"
            if f.get("planned_rate_c_per_h") is not None:
                rate += f" of {format_rate(f['planned_rate_c_per_h'] / 3600.0, units)}"
            out.append(rate)
        if f.get("max_overshoot_c"):
            out.append(f"overshoot {_d(f['max_overshoot_c'], units)} at "
                       f"{clock(f.get('max_overshoot_at_s'))}")
    elif s.kind == "hold":
        if f.get("reached_at_s") is not None:
            out.append(f"band reached {clock(f['reached_at_s'])}")
        if f.get("equalized_at_s") is not None:
            out.append(f"even {clock(f['equalized_at_s'])}")
        if f.get("at_temperature_s") is not None:
            out.append(f"{format_duration(f['at_temperature_s'])} in band of "
                       f"{format_duration(f.get('planned_s'))}")
        if f.get("out_of_band_s"):
            out.append(f"{format_duration(f['out_of_band_s'])} out of band")
        if f.get("max_overshoot_c") is not None:
            out.append(f"overshoot {_d(f['max_overshoot_c'], units)}")
        if f.get("lowest_c") is not None:
            out.append(f"lowest {format_temp(f['lowest_c'], units)}")
    elif s.kind == "pause":
        out.append(f"waited {format_duration(f.get('waited_s'))}")
    return out


def _temper_lines(result: Replay) -> list[str]:
    temper = result.temper
    holds = temper.get("holds") or []
    if not holds:
        return []
    c = temper.get("c", 20.0)
    lines = []
    for h in holds:
        actual = h.get("parameter")
        got = f"P = {actual:,.0f}" if actual is not None else "P not measured"
        source = f" from the {h['source']}" if h.get("source") else ""
        lines.append(f"step {h['index'] + 1} at {format_temp(h['target_c'], result.units)}: "
                     f"{got}{source} (planned {h['planned_parameter']:,.0f})")
    if temper.get("total") is not None:
        lines.append(f"all tempers together: P = {temper['total']:,.0f} (planned "
                     f"{temper['planned_total']:,.0f})")
    lines.append(f"Hollomon-Jaffe P = T (C + log10 t), T in kelvin, t in hours, C = {c:g}; "
                 f"{C_NOTE} (about 10 to 20; 20 is the usual default): compare only with the "
                 "same C")
    return lines


def _quench_lines(result: Replay) -> list[str]:
    lines = []
    for q in result.quench:
        head = f"after step {q['index'] + 1}: "
        if q.get("reason"):
            lines.append(head + q["reason"])
            continue
        t85 = (f"t8/5 (800 to 500 °C) {q['t8_5_s']:.1f} s" if q.get("t8_5_s") is not None
               else f"t8/5 not measured: {q.get('t8_5_reason')}")
        below = format_temp(q["below_c"], result.units)
        to_below = (f"from the end of the hold to below {below}: "
                    f"{format_duration(q['to_below_s'])}" if q.get("to_below_s") is not None
                    else f"below {below} not measured: {q.get('to_below_reason')}")
        lines.append(head + t85 + "; " + to_below)
    return lines


def _alarm_line(a: Mapping[str, Any]) -> str:
    cleared = f", cleared {clock(a['cleared_s'])}" if a.get("cleared_s") is not None else ""
    return f"{clock(a['raised_s'])} {a['severity']}: {a['words']}{cleared}"


def _alarm_lines(result: Replay) -> list[str]:
    """The alarms, and a word when some of their sentences (an older log's, which carry no
    numbers) are as the engine logged them, in other units than the rest of the report."""
    alarms = result.as_dict()["alarms"]
    lines = [_alarm_line(a) for a in alarms]
    logged_units = result.run.get("units")
    if any(a.get("words_as_logged") for a in alarms) and result.source == "log" and (
            logged_units in ("C", "F") and logged_units != result.units):
        lines.append(f"(the alarms' words are as the engine logged them, in "
                     f"{symbol(logged_units)})")
    return lines


def _heading(result: Replay) -> str:
    run = result.run
    if "csv" in run:
        return f"Log {run['csv']} against \"{result.profile.name}\""
    when = ""
    if run.get("started"):
        when = datetime.fromtimestamp(run["started"], UTC).strftime(
            " started %Y-%m-%d %H:%M UTC")
    return (f"Run {run.get('id', '?')}: \"{result.profile.name}\" on {run.get('kiln', '?')}"
            f"{when} ({result.outcome or 'unknown'})")


def whatif_dict(baseline: Replay, result: Replay, changes: Sequence[AlarmChange],
                overrides: Mapping[str, float]) -> dict[str, Any]:
    start = result.trace.start_t
    return {
        "thresholds": dict(overrides),
        "verdict_before": baseline.verdict,
        "verdict": result.verdict,
        "alarms": [{"code": c.code, "words": c.words, "change": c.change,
                    "logged_s": None if c.logged_t is None else c.logged_t - start,
                    "replayed_s": None if c.replayed_t is None else c.replayed_t - start}
                   for c in changes],
        "steps": [{"index": a.index, "before": a.verdict, "after": b.verdict}
                  for a, b in zip(baseline.steps, result.steps, strict=True)],
    }


def _whatif_lines(whatif: Mapping[str, Any], units: Units) -> list[str]:
    names = {k.name: k for k in LIMIT_KEYS}
    shown = []
    for name, value in whatif["thresholds"].items():
        kind = names[name].kind
        words = (format_duration(value) if kind == "duration"
                 else f"{delta_from_c(value, units):g} {symbol(units)}"
                 + ("/min" if kind == "slope" else ""))
        shown.append(f"{name.replace('_', '-')} {words}")
    lines = [f"What if: {', '.join(shown)} (the engine's rules run again over the logged "
             f"samples; the readings stay as logged)",
             f"verdict: {whatif['verdict_before']} with the run's thresholds, "
             f"{whatif['verdict']} with these"]
    for a in whatif["alarms"]:
        at = a["replayed_s"] if a["replayed_s"] is not None else a["logged_s"]
        lines.append(f"  {a['change']:<15} {clock(at)} {a['code']}: {a['words']}")
    if not whatif["alarms"]:
        lines.append("  no alarm fires either way")
    for st in whatif["steps"]:
        if st["before"] != st["after"]:
            lines.append(f"  step {st['index'] + 1}: {st['before']} -> {st['after']}")
    return lines


# ----- text -----


def render_text(result: Replay, whatif: Mapping[str, Any] | None = None) -> str:
    u = result.units
    lines = [_heading(result), f"Verdict: {result.verdict.upper()}"]
    lines += [f"  {r}" for r in result.reasons if not r.startswith("step ")]
    lines.append("")
    for s in result.steps:
        label = f" ({s.step.label})" if s.step.label else ""
        lines.append(f"{s.index + 1:>2}  {describe_step(s.step, u)}{label}")
        lines.append(f"    {s.verdict}" + (f" - {', '.join(step_figures(s, u))}"
                                             if step_figures(s, u) else ""))
        lines += [f"      * {r}" for r in s.reasons]
    data = result.as_dict()
    if data["alarms"]:
        lines += ["", "Alarms:"] + [f"  {line}" for line in _alarm_lines(result)]
    if result.notes:
        lines += ["", "Notes:"] + [f"  {clock(n['at_s'])} {n['text']}" for n in result.notes]
    temper = _temper_lines(result)
    if temper:
        lines += ["", "Tempering parameter:"] + [f"  {t}" for t in temper]
    quench = _quench_lines(result)
    if quench:
        lines += ["", "Quench:"] + [f"  {q}" for q in quench] + [f"  {QUENCH_CAUTION}"]
    if whatif is not None:
        lines += [""] + _whatif_lines(whatif, u)
    if result.source == "rules":
        lines += ["", "Steps found by running the engine's rules over the samples."]
    lines += ["", SAFETY, ""]
    return "\n".join(lines)


# ----- Markdown -----


def _md(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def render_markdown(result: Replay, whatif: Mapping[str, Any] | None = None) -> str:
    u = result.units
    out = [f"# {_md(_heading(result))}", "", f"**Verdict: {result.verdict}**", ""]
    out += [f"- {_md(r)}" for r in result.reasons]
    out += ["", "| # | step | verdict | figures | reasons |", "|---|---|---|---|---|"]
    for s in result.steps:
        out.append(f"| {s.index + 1} | {_md(s.title(u))} | {s.verdict} | "
                   f"{_md('; '.join(step_figures(s, u)))} | {_md('; '.join(s.reasons))} |")
    out += _md_section("Alarms", _alarm_lines(result))
    out += _md_section("Load", _load_lines(result))
    out += _md_section("Notes", [f"{clock(n['at_s'])} {n['text']}" for n in result.notes])
    out += _md_section("Tempering parameter", _temper_lines(result))
    quench = _quench_lines(result)
    out += _md_section("Quench", quench + ([QUENCH_CAUTION] if quench else []))
    if whatif is not None:
        out += _md_section("What if", _whatif_lines(whatif, u))
    out += ["", f"*{SAFETY}*", ""]
    return "\n".join(out)


def _md_section(title: str, lines: list[str]) -> list[str]:
    if not lines:
        return []
    return ["", f"## {title}", ""] + [f"- {_md(line.strip())}" for line in lines]


_LOAD_WORDED = ("material", "thickness", "thickness_m", "pieces", "wrap", "width")
"""The run record's load keys that load_words says; any other is listed as it is."""


def _load_lines(result: Replay) -> list[str]:
    stored = result.run.get("load") or {}
    words = load_words(result.profile.load) or load_words(_stored_load(stored))
    lines = [f"load: {words}"] if words else []
    for key, value in stored.items():
        if key not in _LOAD_WORDED and value is not None:
            lines.append(f"{key}: {value}")
    lines.append("load thermocouple: " + ("logged" if result.trace.has_load else "none"))
    return lines


def _stored_load(stored: Mapping[str, Any]) -> Load:
    """The run record's load (a run whose profile text is missing): the thickness in mm."""
    thickness = stored.get("thickness_m")
    pieces = stored.get("pieces")
    return Load(material=stored.get("material") or None,
                thickness_text=f"{thickness * 1000:g} mm"
                if isinstance(thickness, int | float) and thickness > 0 else None,
                pieces=pieces if isinstance(pieces, int) else None,
                width_text=stored.get("width") or None,
                wrap="foil" if stored.get("wrap") == "foil" else "none")


# ----- HTML -----

_CSS = """
body { font-family: sans-serif; margin: 2em auto; padding: 0 1em; color: #222;
       max-width: 1060px; line-height: 1.35; }
table { border-collapse: collapse; width: 100%; margin: 1em 0; }
th, td { border: 1px solid #ccc; padding: 4px 8px; text-align: left; vertical-align: top;
         overflow-wrap: break-word; }
th { background: #f0f0f0; }
h1 { font-size: clamp(1.3em, 5vw, 2em); }
.table-wrap { overflow-x: auto; }
.met { color: #1b6e20; font-weight: bold; }
.remarks { color: #8a5a00; font-weight: bold; }
.missed { color: #b00020; font-weight: bold; }
.going { color: #35507a; font-style: italic; }
.safety { border: 2px solid #b00020; padding: 0.6em; margin-top: 2em; }
/* The chart takes the page's width; below 640 px it keeps that width and scrolls sideways,
   so its labels stay big enough to read on a phone. */
figure.chart { margin: 1em 0; overflow-x: auto; }
figure.chart svg { display: block; width: 100%; height: auto; min-width: 640px; }
@media print {
  @page { margin: 15mm; }
  body { color: #000; background: #fff; margin: 0; padding: 0; max-width: none;
         font-size: 10pt; }
  h1 { font-size: 16pt; } h2 { font-size: 13pt; break-after: avoid; }
  .met, .remarks, .missed, .going { color: #000; }
  th { background: #fff; border-bottom: 2px solid #000; }
  th, td { border-color: #000; padding: 2px 5px; }
  figure.chart { overflow: visible; break-inside: avoid; page-break-inside: avoid; }
  figure.chart svg { min-width: 0; }
  .table-wrap { overflow: visible; }
  thead { display: table-header-group; }  /* the header again on every page */
  tr, li { break-inside: avoid; page-break-inside: avoid; }
  .safety { border-color: #000; }
}
"""


def _verdict_class(verdict: str) -> str:
    return {MET: "met", MISSED: "missed", UNDER_WAY: "going", NOT_YET: "going"}.get(
        verdict, "remarks")


def _ul(lines: list[str]) -> str:
    if not lines:
        return "<p>none</p>"
    return "<ul>" + "".join(f"<li>{escape(line.strip())}</li>" for line in lines) + "</ul>"


def render_html(result: Replay, whatif: Mapping[str, Any] | None = None) -> str:
    from tuikiln.analysis.report_svg import chart_svg

    u = result.units
    heading = escape(_heading(result))
    rows = []
    for s in result.steps:
        reasons = "<br>".join(escape(r) for r in s.reasons) or "&nbsp;"
        rows.append(f"<tr><td>{s.index + 1}</td><td>{escape(s.title(u))}</td>"
                    f'<td class="{_verdict_class(s.verdict)}">{escape(s.verdict)}</td>'
                    f"<td>{escape('; '.join(step_figures(s, u))) or '&nbsp;'}</td>"
                    f"<td>{reasons}</td></tr>")
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{heading}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        f"<h1>{heading}</h1>",
        f'<p>Verdict: <span class="{_verdict_class(result.verdict)}">'
        f"{escape(result.verdict)}</span></p>",
        _ul(result.reasons) if result.reasons else "",
        "<h2>Plan and actual</h2>",
        f'<figure class="chart">{chart_svg(result)}</figure>',
        "<h2>Steps</h2>",
        '<div class="table-wrap"><table><thead><tr><th>#</th><th>step</th><th>verdict</th>'
        "<th>figures</th><th>reasons</th></tr></thead><tbody>",
        *rows,
        "</tbody></table></div>",
        "<h2>Alarms</h2>",
        _ul(_alarm_lines(result)),
        "<h2>Load</h2>",
        _ul(_load_lines(result)),
        "<h2>Notes</h2>",
        _ul([f"{clock(n['at_s'])} {n['text']}" for n in result.notes]),
        "<h2>Tempering parameter</h2>",
        _ul(_temper_lines(result) or ["no temper hold in this profile"]),
        "<h2>Quench</h2>",
        _ul((_quench_lines(result) + [QUENCH_CAUTION]) if result.quench
            else ["no hardening hold in this profile"]),
    ]
    if whatif is not None:
        parts += ["<h2>What if</h2>", _ul(_whatif_lines(whatif, u))]
    if result.source == "rules":
        parts.append("<p>Steps found by running the engine's rules over the samples.</p>")
    parts += [f'<p class="safety"><strong>{escape(SAFETY)}</strong></p>', "</body>", "</html>",
              ""]
    return "\n".join(parts)
