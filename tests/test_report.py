"""The report: HTML that parses with balanced tags, an SVG chart that parses as XML and that a
headless browser renders (when chromium is installed), and Markdown by the file's suffix."""

from __future__ import annotations

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
