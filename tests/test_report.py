"""The report: HTML that parses with balanced tags, an SVG chart that parses as XML and that a
headless browser renders (when chromium is installed), and Markdown by the file's suffix."""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import pytest

from tests.test_replay_sim import SHORT_C, simulate_run
from tuikiln.cli import main
from tuikiln.runlog import RunLog
from tuikiln.simulator import Fault

VOID = {"meta", "br", "hr", "img", "input", "link", "area", "base", "col", "embed", "source",
        "track", "wbr"}
SVG_NS = "{http://www.w3.org/2000/svg}"


class StrictTags(HTMLParser):
    """Every opened tag is closed, in order (void elements excepted)."""

    def __init__(self) -> None:
        super().__init__()
        self.stack: list[str] = []
        self.problems: list[str] = []
        self.seen: set[str] = set()

    def handle_starttag(self, tag: str, attrs: list) -> None:  # type: ignore[type-arg]
        self.seen.add(tag)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag: str, attrs: list) -> None:  # type: ignore[type-arg]
        self.seen.add(tag)

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.problems.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()


@pytest.fixture(scope="module")
def reports(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    folder = Path(tmp_path_factory.mktemp("report"))
    log = RunLog(folder / "runs.sqlite")
    simulate_run(log, SHORT_C, faults=(Fault("door-open", 1700.0, 300.0),))
    log.close()
    html_file, md_file = folder / "report.html", folder / "report.md"
    assert main(["--data", str(folder), "report", "last", "-o", str(html_file)]) == 0
    assert main(["--data", str(folder), "report", "last", "-o", str(md_file)]) == 0
    return html_file, md_file


def test_html_is_balanced_and_self_contained(reports) -> None:  # noqa: ANN001
    html_file, _ = reports
    text = html_file.read_text(encoding="utf-8")
    parser = StrictTags()
    parser.feed(text)
    parser.close()
    assert parser.problems == [] and parser.stack == []
    assert {"html", "head", "body", "table", "svg", "path"} <= parser.seen
    assert "<script" not in text and "http://" not in text.replace(
        'xmlns="http://www.w3.org/2000/svg"', "")
    assert "tuikiln is not a safety device" in text
    assert "C depends on the steel" in text
    assert "missed" in text and "out of the band for" in text


def test_svg_parses_and_marks_alarms(reports) -> None:  # noqa: ANN001
    html_file, _ = reports
    text = html_file.read_text(encoding="utf-8")
    svg = ET.fromstring(text[text.index("<svg"):text.index("</svg>") + len("</svg>")])
    titles = [e.text for e in svg.iter(f"{SVG_NS}title")]
    assert {"plan", "setpoint", "chamber", "load"} <= set(titles)
    assert any(t and "out of its band" in t for t in titles)  # the alarm marker
    for path in svg.iter(f"{SVG_NS}path"):
        assert path.get("d", "").startswith("M")


def test_markdown_by_suffix(reports) -> None:  # noqa: ANN001
    _, md_file = reports
    text = md_file.read_text(encoding="utf-8")
    assert text.startswith("# Run ")
    assert "| # | step | verdict |" in text and "<svg" not in text
    assert "not a safety device" in text


def test_chromium_renders_the_chart(reports) -> None:  # noqa: ANN001
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed")
    html_file, _ = reports
    shot = html_file.with_suffix(".png")
    with tempfile.TemporaryDirectory() as profile_dir:
        subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                        "--disable-background-networking", "--disable-component-update",
                        "--disable-sync", "--no-first-run", f"--user-data-dir={profile_dir}",
                        f"--screenshot={shot}", "--window-size=1200,1600",
                        html_file.as_uri()], capture_output=True, timeout=60, check=False)
    data = shot.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert len(data) > 20_000  # a blank page is a few kB; the chart and tables are far more


def test_report_to_unwritable_place(reports, capsys) -> None:  # noqa: ANN001
    html_file, _ = reports
    code = main(["--data", str(html_file.parent), "report", "last", "-o",
                 str(html_file.parent / "missing" / "r.html")])
    assert code == 1
    assert "cannot write the report" in capsys.readouterr().err


# ----- issue 18: a chart that fits any page, dashes as well as colours, print, --units -----


def chart_of(html_file: Path) -> ET.Element:
    text = html_file.read_text(encoding="utf-8")
    return ET.fromstring(text[text.index("<svg"):text.index("</svg>") + len("</svg>")])


def test_chart_takes_the_page_width(reports) -> None:  # noqa: ANN001
    svg = chart_of(reports[0])
    # A viewBox and no pixel size: the browser scales it to the page (SVG 1.1, 7.7).
    x, y, width, height = (float(v) for v in svg.get("viewBox", "").split())
    assert (x, y) == (0.0, 0.0) and width > height > 0
    assert svg.get("width") == "100%" and svg.get("height") is None
    css = reports[0].read_text(encoding="utf-8")
    assert "height: auto" in css and 'name="viewport"' in css


def test_each_series_has_its_own_dash_and_the_legend_shows_it(reports) -> None:  # noqa: ANN001
    svg = chart_of(reports[0])
    dashes = {}
    for path in svg.iter(f"{SVG_NS}path"):
        name = (path.get("class") or "").removeprefix("series-")
        if name:
            dashes[name] = path.get("stroke-dasharray") or "solid"
    assert set(dashes) == {"plan", "setpoint", "chamber", "load"}
    assert len(set(dashes.values())) == len(dashes)  # no two series share a dash
    legend = next(g for g in svg.iter(f"{SVG_NS}g") if g.get("class") == "legend")
    lines = [e for e in legend if e.tag == f"{SVG_NS}line"]
    names = [e.text for e in legend if e.tag == f"{SVG_NS}text"]
    shown = {name: line.get("stroke-dasharray") or "solid"
             for name, line in zip(names, lines, strict=False)}
    assert {n: shown[n] for n in dashes} == dashes
    for line in lines:  # long enough to show the pattern at least twice
        pattern = [float(v) for v in (line.get("stroke-dasharray") or "1").split()]
        assert float(line.get("x2")) - float(line.get("x1")) >= 2 * sum(pattern)


@pytest.fixture(scope="module")
def long_report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo profile's eight steps: a report longer than one printed page."""
    folder = Path(tmp_path_factory.mktemp("long-report"))
    log = RunLog(folder / "runs.sqlite")
    text = (Path(__file__).resolve().parents[1] / "profiles" / "demo-harden-temper.toml"
            ).read_text(encoding="utf-8")
    simulate_run(log, text, faults=(Fault("door-open", 5000.0, 300.0),), every_s=2.0)
    log.close()
    html_file = folder / "long.html"
    assert main(["--data", str(folder), "report", "last", "-o", str(html_file)]) == 0
    return html_file


def test_printed_chart_stays_on_one_page_and_table_heads_repeat(long_report: Path) -> None:
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None or shutil.which("pdftotext") is None:
        pytest.skip("needs chromium and pdftotext (poppler-utils)")
    # A spacer before the chart puts it across the first page's end (a letter page holds
    # about 940 px between 15 mm margins): only the print style keeps it whole.
    html = long_report.read_text(encoding="utf-8")
    spaced = long_report.with_name("spaced.html")
    spaced.write_text(html.replace('<figure class="chart">',
                                   '<div style="height: 560px"></div><figure class="chart">'),
                      encoding="utf-8")
    svg = chart_of(long_report)
    y_labels = [e for e in svg.iter(f"{SVG_NS}text") if e.get("text-anchor") == "end"]
    top_label = min(y_labels, key=lambda e: float(e.get("y", "0"))).text or ""
    pdf = long_report.with_suffix(".pdf")
    with tempfile.TemporaryDirectory() as profile_dir:
        subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                        "--disable-background-networking", "--disable-component-update",
                        "--disable-sync", "--no-first-run", f"--user-data-dir={profile_dir}",
                        "--no-pdf-header-footer", f"--print-to-pdf={pdf}",
                        spaced.as_uri()], capture_output=True, timeout=90, check=False)
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True,
                          text=True, timeout=30, check=True).stdout
    pages = [page for page in text.split("\f") if page.strip()]
    assert len(pages) >= 2  # else nothing here is tested
    # The chart whole on one page: its top label, its axis title and its legend together,
    # on the second page (the spacer left too little room on the first). Chromium keeps an
    # inline SVG whole by itself; the style's break-inside rule is for the figure around it
    # and for browsers that would slice it.
    chart_pages = [i for i, page in enumerate(pages) if "hours from the start" in page]
    assert chart_pages == [1], chart_pages
    chart_page = pages[chart_pages[0]]
    assert all(word in chart_page for word in ("plan", "setpoint", "chamber", "load"))
    assert re.search(rf"(^|\s){top_label}(\s|$)", chart_page, re.M), (top_label, chart_page)
    # Every page with rows of the step table starts them under the table's header.
    for page in pages:
        rows = [line for line in page.splitlines() if re.match(r"\s*\d+\s+step \d+", line)]
        if rows:
            assert "figures" in page and "reasons" in page, page
    # The print style sheet is black on white (what chromium printed it with).
    css = long_report.read_text(encoding="utf-8")
    print_css = css[css.index("@media print"):]
    assert "color: #000" in print_css and "background: #fff" in print_css


def test_report_units_convert_every_temperature(reports, capsys) -> None:  # noqa: ANN001
    html_file, _ = reports
    folder = html_file.parent
    # The run was logged in °C (SHORT_C holds at 500 °C). °F = °C x 1.8 + 32 (NIST SP 811,
    # appendix B.9): 500 °C is 932 °F.
    assert main(["--data", str(folder), "report", "last", "-o", "-", "--units", "F"]) == 0
    text = capsys.readouterr().out
    assert "932 °F" in text and "500 °C" not in text.split("Alarms:")[0]
    # The alarms carry their numbers (issue 17): their words are in °F too, with no note.
    alarms = text.split("Alarms:")[1].split("\n\n")[0]
    assert "°F" in alarms and "°C" not in alarms, alarms
    assert "as the engine logged them" not in text
    assert main(["--data", str(folder), "report", "last", "-o", "-"]) == 0
    default = capsys.readouterr().out
    assert "500 °C" in default and "°F" not in default  # default: the run's own units
    shown_f = folder / "f.html"
    assert main(["--data", str(folder), "report", "last", "-o", str(shown_f), "--units",
                 "f"]) == 0
    svg = chart_of(shown_f)
    assert "°F" in [e.text for e in svg.iter(f"{SVG_NS}text")]  # the axis unit
    md = folder / "f.md"
    assert main(["--data", str(folder), "report", "last", "-o", str(md), "--units", "F"]) == 0
    assert "932 °F" in md.read_text(encoding="utf-8")


def test_report_units_help_says_the_default(capsys) -> None:  # noqa: ANN001
    with pytest.raises(SystemExit):
        main(["report", "--help"])
    words = " ".join(capsys.readouterr().out.split())
    assert "--units {C,F}" in words and "default: the run's units" in words
    assert "--csv-units" in words


def test_report_of_a_csv_in_f_shown_in_c(tmp_path: Path, capsys) -> None:  # noqa: ANN001
    profile = tmp_path / "short.toml"
    profile.write_text(SHORT_C, encoding="utf-8")
    rows = ["seconds,oven_F"] + [f"{t},{min(20 + t * 0.5, 500) * 1.8 + 32:.2f}"
                                  for t in range(0, 4000, 10)]
    csv_file = tmp_path / "other.csv"
    csv_file.write_text("\n".join(rows) + "\n", encoding="utf-8")
    common = ["report", "--csv", str(csv_file), "--against", str(profile), "--time-column",
              "seconds", "--chamber-column", "oven_F", "--csv-units", "F", "-o", "-"]
    assert main([*common, "--units", "C"]) == 0
    assert "500 °C" in capsys.readouterr().out
    assert main([*common, "--units", "F"]) == 0
    assert "932 °F" in capsys.readouterr().out


def test_report_refuses_an_unknown_form(reports, capsys) -> None:  # noqa: ANN001
    folder = reports[0].parent
    assert main(["--data", str(folder), "report", "last", "-o", str(folder / "r.pdf")]) == 1
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "name the file .html, .md or .txt" in err
