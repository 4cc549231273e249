"""`warehouse patterns` on the demo scenario: the planted period, rhythm, busiest weekday and shift."""
from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from click.testing import CliRunner

from seed import generate as scenario
from warehouse.cli import cli
from warehouse.home import open_warehouse


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def patterns_json(home: Path, *args: str) -> dict:
    result = run("--home", str(home), "patterns", *args, "--format", "json")
    assert result.exit_code == 0, result.stderr
    return json.loads(result.output)


def test_planted_destage_period_within_two_percent(demo_home: Path) -> None:
    """seed/SCENARIO.md: write latency + 4 ms for 120 s every 660 s on every pool."""
    out = patterns_json(demo_home, "san01/pool=vdi/write_latency_ms", "--max-period", "2h")
    seconds = [p["seconds"] for p in out["periods"]]
    assert any(abs(s - scenario.DESTAGE_PERIOD_S) <= 0.02 * scenario.DESTAGE_PERIOD_S for s in seconds), seconds
    destage = next(p for p in out["periods"] if abs(p["seconds"] - 660) <= 13.2)
    assert destage["p"] < 0.01 and destage["label"] == "11 min"


def test_daily_and_weekly_rhythm_and_busiest_weekday(demo_home: Path) -> None:
    """The planted working rhythm: a 1-day and a 7-day period; Tuesday the busiest weekday."""
    out = patterns_json(demo_home, "san01/pool=files/read_iops", "--bucket", "10m", "--max-period", "8d")
    labels = [p["seconds"] for p in out["periods"]]
    assert any(abs(s - 86400) <= 0.02 * 86400 for s in labels), labels
    assert any(abs(s - 7 * 86400) <= 0.1 * 7 * 86400 for s in labels), labels
    by_day: dict[str, float] = {}
    for cell in out["calendar"]:
        by_day[cell["weekday"]] = by_day.get(cell["weekday"], 0.0) + cell["mean"]
    assert max(by_day, key=by_day.get) == "tue"
    assert len(out["calendar"]) == 7 * 24


def test_planted_level_shift_located_within_one_day(demo_home: Path) -> None:
    """seed/SCENARIO.md: pool vdi read IOPS x1.30 from 2026-03-16 06:00 local."""
    out = patterns_json(demo_home, "san01/pool=vdi/read_iops")
    planted = datetime.fromisoformat(scenario.SHIFT_AT_LOCAL).replace(tzinfo=ZoneInfo("Europe/Berlin"))
    near = [cp for cp in out["change_points"] if abs((datetime.fromisoformat(cp["ts"]) - planted).total_seconds()) <= 86400]
    assert near, out["change_points"]
    assert near[0]["after_mean"] > near[0]["before_mean"]


def test_episodes_and_clustering(demo_home: Path) -> None:
    """The Thursday scan drives vdi-hv02 CPU over its p99: episodes cluster on Thursdays."""
    out = patterns_json(demo_home, "vdi-hv02/Process/scanagent/% Processor Time", "--above", "100", "--max-period", "2h")
    assert len(out["episodes"]) == 4  # one 40-minute scan on each of 4 Thursdays
    for e in out["episodes"]:
        start = datetime.fromisoformat(e["start"])
        assert start.weekday() == scenario.SCAN_WEEKDAY and start.hour == 13
        assert 35 * 60 <= e["seconds"] <= 41 * 60
    assert out["episode_clustering"]["by_weekday"][scenario.SCAN_WEEKDAY] == 4


def test_table_view_and_udfs(demo_home: Path) -> None:
    result = run("--home", str(demo_home), "patterns", "san01/pool=vdi/write_latency_ms", "--max-period", "2h")
    assert result.exit_code == 0
    assert "every 11 min" in result.output and "Not finding a pattern does not prove" in result.output
    with open_warehouse(demo_home) as wh:
        period, r1 = wh.con.execute(
            "SELECT dominant_period(list(v ORDER BY k), 60), autocorrelation(list(v ORDER BY k), 1) FROM ("
            " SELECT epoch(ts)::BIGINT // 60 AS k, avg(value) AS v FROM samples"
            " WHERE key = 'san01/pool=vdi/write_latency_ms' AND ts < TIMESTAMPTZ '2026-03-05 00:00:00+01' GROUP BY k)"
            ).fetchone()
    assert abs(period - 660) <= 13.2
    assert 0 < r1 < 1


@pytest.mark.parametrize("args, message", [
    (["san01/pool=vdi/capacity_total_gb"], "constant"),
    (["san01/pool=vdi/read_iops", "--from", "2026-03-02T08:00", "--to", "2026-03-02T08:10",
      "--min-period", "1h"], "too few buckets"),
    (["san01/pool=vdi/read_iops", "--from", "2027-01-01"], "no samples"),
    (["san01/pool=vdi/read_iops", "--above", "lots"], "cannot read --above"),
])
def test_bad_input_is_one_line(demo_home: Path, args: list[str], message: str) -> None:
    result = run("--home", str(demo_home), "patterns", *args)
    assert result.exit_code == 1 and result.stderr.count("\n") == 1 and message in result.stderr
