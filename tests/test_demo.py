"""`warehouse demo`: the whole job on the embedded scenario, checked against its planted list."""
from __future__ import annotations

import base64
import re
from datetime import datetime
from html.parser import HTMLParser
from pathlib import Path

import pytest
from click.testing import CliRunner

from seed import generate as scenario
from seed.generate import MALFORMED
from warehouse.cli import cli
from warehouse.home import open_warehouse
from warehouse.stats.patterns import period_label
from warehouse.timeutil import format_duration


@pytest.mark.slow
def test_demo_loads_everything_and_quarantines_exactly_the_planted_rows(tmp_path: Path) -> None:
    home = tmp_path / "demo"
    result = CliRunner().invoke(cli, ["--home", str(home), "demo"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert "generated 48 CSV files" in result.output
    assert "rows_quarantined: 5" in result.output and "cells_quarantined: 2" in result.output
    with open_warehouse(home) as wh:
        got = sorted(wh.con.execute(
            "SELECT regexp_extract(file, '[^/]+/[^/]+$'), line FROM quarantine").fetchall())
        accounting = wh.con.execute(
            "SELECT count(*) FROM ingests WHERE rows_read <> rows_loaded + rows_quarantined").fetchone()[0]
        hostless = wh.con.execute("SELECT count(*) FROM counters WHERE host = ''").fetchone()[0]
        zone = wh.zone
    assert got == sorted((m.file, m.line_small) for m in MALFORMED)
    assert accounting == 0
    assert hostless == 0
    assert zone == "Europe/Berlin"
    check_headlines(result.output)
    check_report(home / "report.html", result.output)
    # the office's own service levels (SCENARIO "Service levels") catch the destage pulses
    assert (home / "limits.toml").read_text(encoding="utf-8") == scenario.SERVICE_LEVELS_TOML
    limits = CliRunner().invoke(cli, ["--home", str(home), "limits", "*/write_latency_ms", "--period", "2026-W11",
                                      "--format", "json"], catch_exceptions=False)
    assert limits.exit_code == 0, limits.output
    assert '"warn_share": 0.18' in limits.output and str(home / "limits.toml") in limits.output
    again = CliRunner().invoke(cli, ["--home", str(home), "demo"], catch_exceptions=False)
    assert again.exit_code == 0 and "(48 skipped as already loaded)" in again.output
    assert "weekly summaries already current" in again.output
    check_headlines(again.output)


def check_headlines(output: str) -> None:
    """The three headline findings name the planted parameters of seed/SCENARIO.md: the scan's
    process, weekday, hour and length; queue depth leading read latency by 2 samples (60 s at small
    scale); the 660 s destage period; the rise of pool vdi's reads on Monday 16 March 06:00, +30%."""
    lines = output.splitlines()
    start = lines.index("headline findings:")
    first, second, third = lines[start + 1:start + 4]
    weekday = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")[scenario.SCAN_WEEKDAY]
    assert first.startswith(f"  1. {scenario.SCAN_HOST}'s CPU spikes ({weekday} {int(scenario.SCAN_START_H):02d}:00,"
                            f" {scenario.SCAN_DURATION_S // 60} min): first suspect"
                            f" {scenario.SCAN_HOST}/Process/{scenario.SCAN_PROCESS}/% Processor Time (r +")
    lead = format_duration(scenario.LEAD_SAMPLES * 60)
    assert f"follows {scenario.ARRAY}/pool={scenario.LEAD_POOL}/queue_depth, which leads by {lead} (r +" in first
    assert second.startswith(f"  2. {scenario.ARRAY}/pool=vdi/write_latency_ms pulses every"
                             f" {period_label(scenario.DESTAGE_PERIOD_S)} (")
    shift = datetime.fromisoformat(scenario.SHIFT_AT_LOCAL)
    assert third.startswith(f"  3. {scenario.ARRAY}/pool={scenario.SHIFT_POOL}/read_iops rose from"
                            f" {shift:%a %d %b %Y}: median ")
    pct = float(re.search(r"\(([+-]\d+)%\)", third)[1])
    assert abs(pct - (scenario.SHIFT_FACTOR - 1) * 100) <= 5


class _Images(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.sections: list[str] = []
        self.images: list[bytes] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        if tag == "section":
            self.sections.append(a["id"] or "")
        if tag == "img":
            self.images.append(base64.b64decode((a["src"] or "").removeprefix("data:image/png;base64,"), validate=True))


def check_report(path: Path, output: str) -> None:
    assert f"report: {path.resolve()} (9 sections" in output
    doc = _Images()
    doc.feed(path.read_text(encoding="utf-8"))
    kinds = [s.rsplit("-", 1)[0] for s in doc.sections[1:-1]]
    assert kinds == ["size", "patterns", "correlate", "correlate", "patterns", "patterns", "compare", "changes",
                     "trend"]
    assert doc.sections[0] == "summary" and doc.sections[-1] == "before-you-act"
    assert len(doc.images) == 9 and all(img.startswith(b"\x89PNG\r\n\x1a\n") for img in doc.images)
