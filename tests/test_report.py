"""`warehouse report`: one self-contained HTML file that parses, holds every section and whose
every embedded image decodes; the optional PDF; bad input in one line."""
from __future__ import annotations

import base64
import io
import json
from html.parser import HTMLParser
from pathlib import Path

import pytest
from click.testing import CliRunner
from PIL import Image

from warehouse.changes import ChangesRequest
from warehouse.cli import cli
from warehouse.compare import CompareRequest
from warehouse.correlate import CorrelateRequest
from warehouse.home import open_warehouse
from warehouse.patterns import PatternRequest
from warehouse.report import BEFORE_YOU_ACT, METHODS, ReportPlan, ReportRequest, write_report
from warehouse.sizing import SizeRequest, size_selector
from warehouse.trend import TrendRequest

STORAGE = "san01/pool=*/*_iops"
HOST_CPU = "vdi-hv02/Processor/_Total/% Processor Time"
WEEK = ("2026-03-09", "2026-03-16")
SIZE = SizeRequest(STORAGE, *WEEK, combine="sum", window="busiest-hours", days="mon-fri")
ANALYSES = (
    SIZE,
    CorrelateRequest(HOST_CPU, start="2026-03-19T12:00", end="2026-03-19T15:00"),
    PatternRequest("san01/pool=vdi/write_latency_ms", "2026-03-02", "2026-03-05", max_period="2h"),
    TrendRequest("san01/pool=vdi/read_iops", combine="sum", capacity=15000),
    CompareRequest("san01/pool=vdi/read_iops", "2026-W11", "2026-W12"),
    ChangesRequest(period="2026-W12", history=3, selector="san01/*"),
)
KINDS = ("size", "correlate", "patterns", "trend", "compare", "changes")


class Outline(HTMLParser):
    """Sections, headings, images and every link-like attribute of a document."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.sections: list[str] = []
        self.images: list[str] = []
        self.refs: list[str] = []
        self.text: list[str] = []
        self.open_tags: list[str] = []
        self.title = ""
        self._in_title = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        if tag not in ("meta", "img", "br"):
            self.open_tags.append(tag)
        if tag == "section":
            self.sections.append(a.get("id") or "")
        if tag == "img":
            self.images.append(a["src"] or "")
        self.refs += [v for k, v in attrs if k in ("href", "src") and v]
        self._in_title = tag == "title"

    def handle_endtag(self, tag: str) -> None:
        assert self.open_tags and self.open_tags[-1] == tag, (tag, self.open_tags[-3:])
        self.open_tags.pop()
        self._in_title = False

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if self._in_title:
            self.title += data


@pytest.fixture(scope="module")
def built(demo_home: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[dict, Outline, dict, Path]:
    out = tmp_path_factory.mktemp("report")
    with open_warehouse(demo_home) as wh:
        written = write_report(wh, ReportRequest(ANALYSES, "Tannerfield <storage> & hosts", dpi=40),
                               out / "report.html", out / "report.pdf")
        sized = size_selector(wh, SIZE)
    doc = Outline()
    doc.feed((out / "report.html").read_text(encoding="utf-8"))
    doc.close()
    return written, doc, sized, out


def test_report_parses_and_holds_every_section(built: tuple) -> None:
    written, doc, _, out = built
    assert doc.open_tags == []                                    # every element closed, properly nested
    assert doc.sections == ["summary"] + [f"{k}-{i}" for i, k in enumerate(KINDS, 1)] + ["before-you-act"]
    assert [s["kind"] for s in written["sections"]] == list(KINDS)
    assert written["bytes"] == (out / "report.html").stat().st_size
    text = " ".join(" ".join(doc.text).split())
    for kind in KINDS:
        assert " ".join(METHODS[kind].split()) in text            # the method paragraph of each
    for caution in BEFORE_YOU_ACT:
        assert caution in text
    assert text.count("Key numbers") == text.count("Method and assumptions") == len(KINDS)


def test_report_is_self_contained_and_escaped(built: tuple) -> None:
    _, doc, _, out = built
    assert all(ref.startswith(("data:image/png;base64,", "#")) for ref in doc.refs), doc.refs
    raw = (out / "report.html").read_text(encoding="utf-8")
    assert "Tannerfield &lt;storage&gt; &amp; hosts" in raw and "<storage>" not in raw
    assert doc.title == "Tannerfield <storage> & hosts"
    assert "http://" not in raw and "https://" not in raw         # nothing to fetch when opened


def test_every_embedded_image_decodes(built: tuple) -> None:
    _, doc, _, _ = built
    assert len(doc.images) == len(KINDS)
    for src in doc.images:
        data = base64.b64decode(src.removeprefix("data:image/png;base64,"), validate=True)
        image = Image.open(io.BytesIO(data))
        image.verify()                                            # Pillow checks the chunks and their CRCs
        assert image.format == "PNG" and image.size[0] == round(7.2 * 40)


def test_readings_state_the_measured_figures(built: tuple) -> None:
    written, doc, sized, _ = built
    text = " ".join(doc.text)
    first = written["sections"][0]["reading"]
    assert first.startswith("At least 95% of the busiest-hour samples were at or below")
    assert f"{sized['bound']:,.0f}" in first and f"{sized['max']:,.0f}" in first
    assert f"Sizing for the mean ({sized['mean']:,.0f} IO/s) would have left every one of the 5 busiest hours" in text
    assert "vdi-hv02/Process/scanagent/% Processor Time" in written["sections"][1]["reading"]
    assert "every 11 min" in written["sections"][2]["reading"]


def test_pdf_has_a_text_page_and_one_page_per_figure(built: tuple) -> None:
    written, _, _, out = built
    data = (out / "report.pdf").read_bytes()
    assert data.startswith(b"%PDF-") and data.rstrip().endswith(b"%%EOF")
    assert data.count(b"/Type /Page\n") + data.count(b"/Type /Page ") == len(KINDS) + 1
    assert written["pdf"] == str(out / "report.pdf")


def test_plan_turns_options_into_analyses() -> None:
    plan = ReportPlan(selectors=("a/*", "b/*"), window="busiest-hours", suspects=("t",), max_lag=3,
                      pattern_selectors=("p",), trend_selectors=("w",), before="2026-W11", after="2026-W12",
                      changes_period="2026-W12")
    analyses = plan.request().analyses
    kinds = [type(a).__name__ for a in analyses]
    assert kinds == ["SizeRequest", "SizeRequest", "CorrelateRequest", "PatternRequest", "PatternRequest",
                     "PatternRequest", "TrendRequest", "CompareRequest", "CompareRequest", "ChangesRequest"]
    combined = ReportPlan(trend_selectors=("one/counter", "many/*"), combine="sum").request().analyses
    assert [t.combine for t in combined] == [None, "sum"]     # one counter's trend reads its weekly rollup


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def test_cli_report(demo_home: Path, tmp_path: Path) -> None:
    out = tmp_path / "r.html"
    result = run("--home", str(demo_home), "report", "san01/pool=vdi/read_iops", "--from", "2026-03-02",
                 "--to", "2026-03-05", "--max-period", "2h", "--out", str(out), "--format", "json")
    assert result.exit_code == 0, result.stderr
    written = json.loads(result.stdout)
    assert written["out"] == str(out) and [s["kind"] for s in written["sections"]] == ["size", "patterns"]
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    table = run("--home", str(demo_home), "report", "san01/pool=vdi/read_iops", "--from", "2026-03-02",
                "--to", "2026-03-03", "--max-period", "2h", "--out", str(out))
    lines = table.stdout.splitlines()
    assert lines[0].startswith(f"report written to {out} (") and "2 sections" in lines[0]
    assert lines[1].startswith("  - At least 95% of the samples were at or below")
    assert max(len(line) for line in lines[1:]) <= 100      # readings wrapped (the first line holds a path)


@pytest.mark.parametrize("args, message", [
    ([], "Error: nothing to report: give SELECTORS, or --suspects, --patterns, --trend, --compare or --changes"),
    (["x/*", "--out", "r.txt"], "Error: cannot write the report to 'r.txt': the file name must end in .html"),
    (["x/*", "--pdf", "r.doc"], "Error: cannot write a PDF to 'r.doc': the file name must end in .pdf"),
    (["x/*", "--before", "2026-W11"], "Error: give --before and --after together"),
    (["no-such/*"], "Error: no counter matches 'no-such/*'"),
])
def test_bad_input_is_one_line(demo_home: Path, args: list[str], message: str) -> None:
    result = run("--home", str(demo_home), "report", *args)
    assert result.exit_code == 1 and result.stderr.count("\n") == 1, result.stderr
    assert result.stderr.startswith(message)
    assert not Path("r.txt").exists() and not Path("report.html").exists()
