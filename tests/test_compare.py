"""`warehouse compare` and `warehouse changes` on the demo scenario, the Nile and small made-up homes."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from seed import generate as seed
from warehouse.changes import ChangesRequest, find_changes
from warehouse.cli import cli
from warehouse.compare import CompareRequest, compare_periods
from warehouse.errors import WarehouseError
from warehouse.home import open_warehouse, writer
from warehouse.ingest.run import IngestOptions, ingest_files
from warehouse.timeutil import local_datetime, parse_period, period_before

REFERENCE = Path(__file__).parent / "reference"
VDI = f"{seed.ARRAY}/pool={seed.SHIFT_POOL}"


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


# -- periods ----------------------------------------------------------------------------------------

def test_periods_iso_weeks_days_months_and_ranges() -> None:
    """ISO weeks (Monday 00:00 local, ISO 8601 numbering; 2026-W14 starts Monday 30 March 2026 by
    the calendar), across the DST change of 29 March 2026 in Europe/Berlin."""
    zone = "Europe/Berlin"
    w14 = parse_period("2026-W14", zone)
    assert local_datetime(w14.start_us, zone).isoformat() == "2026-03-30T00:00:00+02:00"
    assert (w14.end_us - w14.start_us) == 7 * 86_400 * 10**6
    w13 = period_before(w14, 1, zone)
    assert w13.label == "2026-W13" and (w13.end_us - w13.start_us) == (7 * 24 - 1) * 3600 * 10**6
    day = parse_period("2026-03-16", zone)
    assert period_before(day, 2, zone).label == "2026-03-02"          # same weekday, two weeks back
    month = parse_period("2026-03", zone)
    assert period_before(month, 1, zone).label == "2026-02"
    span = parse_period("2026-03-16T08:00..2026-03-16T12:00", zone)
    assert span.kind == "range" and span.end_us - span.start_us == 4 * 3600 * 10**6
    for bad, words in [("2026-W54", "cannot read period"), ("2026-03-16..2026-03-15", "empty period"),
                       ("last tuesday", "cannot read period"), ("..2026-03-02", "needs a start and an end")]:
        with pytest.raises(WarehouseError, match=words):
            parse_period(bad, zone)


# -- compare ------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def nile_home(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("nile")
    rows = np.loadtxt(REFERENCE / "timeseries" / "nile.csv", delimiter=",", skiprows=1)
    csv = root / "nile.csv"
    csv.write_text("time,flow\n" + "".join(f"{int(y)}-01-01T00:00:00Z,{v:g}\n" for y, v in rows))
    home = root / "wh"
    run("--home", str(home), "init", "--zone", "UTC")
    ingest_files(home, [csv], IngestOptions(host="aswan"))
    return home


def test_nile_through_the_command(nile_home: Path) -> None:
    """Nile flow (Cobb 1978): 1871-1897 vs 1899-1970, mean 1097.75 -> 849.97, shift about -248.
    The command (one sample a year, 1-day buckets) reports a significant fall whose interval holds it."""
    out = run("--home", str(nile_home), "compare", "aswan/flow", "--before", "1871-01-01..1898-01-01",
              "--after", "1899-01-01..1971-01-01", "--bucket", "1d", "--format", "json")
    assert out.exit_code == 0, out.output
    r = json.loads(out.output)
    assert (r["before"]["n"], r["after"]["n"]) == (27, 72)
    assert r["after"]["mean"] == pytest.approx(849.97, abs=0.01)     # Cobb 1978, as in SOURCES.md 3.4
    assert r["shift_low"] < -248 < r["shift_high"] and r["shift"] == pytest.approx(-248, rel=0.1)
    assert r["changed"] and r["p_value"] < 1e-4 and r["verdict"].startswith("aswan/flow fell")


def test_demo_rollout_week_against_the_week_before(demo_home: Path) -> None:
    """Planted (seed/SCENARIO.md #6): vdi read/write IOPS x 1.30 from Monday 2026-03-16 06:00 local
    (week 2026-W12). The files pool is untouched."""
    with open_warehouse(demo_home) as wh:
        r = compare_periods(wh, CompareRequest(f"{VDI}/read_iops", "2026-W11", "2026-W12"))
        control = compare_periods(wh, CompareRequest(f"{seed.ARRAY}/pool=files/read_iops", "2026-W11", "2026-W12"))
        week = parse_period("2026-W12", wh.zone)
        direct = wh.con.execute(
            "SELECT quantile_cont(v, 0.95), count(*) FROM (SELECT time_bucket(INTERVAL 1 minute, ts) AS b, avg(value) AS v"
            " FROM samples WHERE key = $k AND ts >= make_timestamptz($a) AND ts < make_timestamptz($z) GROUP BY b)",
            {"k": f"{VDI}/read_iops", "a": week.start_us, "z": week.end_us}).fetchone()
    assert r["changed"] and r["shift"] > 0 and r["verdict"].startswith(f"{VDI}/read_iops rose")
    assert r["after"]["p95"] / r["before"]["p95"] == pytest.approx(seed.SHIFT_FACTOR, rel=0.05)
    assert r["after"]["p95"] == pytest.approx(direct[0], rel=1e-12) and r["after"]["n"] == direct[1]   # DuckDB SQL
    assert r["before"]["n_effective"] < r["before"]["n"] / 10           # the daily rhythm: far fewer independent
    assert not control["changed"] and control["shift_low"] < 0 < control["shift_high"]


def test_demo_window_and_days_reach_the_samples(demo_home: Path) -> None:
    """--days mon-fri keeps weekday buckets only: 5 x 1440 one-minute buckets per week, less the
    one vdi write_iops row of 2026-03-18 08:00Z quarantined as ragged (SCENARIO "ragged-long")."""
    with open_warehouse(demo_home) as wh:
        r = compare_periods(wh, CompareRequest(f"{VDI}/write_iops", "2026-W10", "2026-W12", days="mon-fri"))
    assert r["before"]["n"] == 5 * 1440 and r["after"]["n"] == 5 * 1440 - 1 and r["changed"]


@pytest.mark.parametrize("args,message", [
    (["--before", "2026-W11", "--after", "2026-03-12..2026-03-20"], "the periods overlap"),
    (["--before", "2026-W11", "--after", "2026-W30"], "the --after period 2026-W30 holds 0 samples"),
    (["--before", "2026-W1x", "--after", "2026-W12"], "cannot read period '2026-W1x'"),
])
def test_compare_bad_input_is_one_line(demo_home: Path, args: list[str], message: str) -> None:
    out = run("--home", str(demo_home), "compare", f"{VDI}/read_iops", *args)
    assert out.exit_code == 1 and out.stderr.count("\n") == 1 and message in out.stderr, out.stderr


# -- changes ------------------------------------------------------------------------------------------

def test_demo_changes_ranks_the_rollout_first(demo_home: Path) -> None:
    """The week of the planted rollout (2026-W12) against the two weeks before it: the affected vdi
    I/O counters (IOPS, and queue depth and read latency that follow them) take the first places, up,
    with IOPS about +30%; every mean equals DuckDB's avg over the same week."""
    with open_warehouse(demo_home) as wh:
        r = find_changes(wh, ChangesRequest(period="2026-W12", history=8, top=10))
        week = parse_period("2026-W12", wh.zone)
        means = dict(wh.con.execute(
            "SELECT key, avg(value) FROM samples WHERE ts >= make_timestamptz($a) AND ts < make_timestamptz($z)"
            " GROUP BY key", {"a": week.start_us, "z": week.end_us}).fetchall())
    top = [row["key"] for row in r["results"][:4]]
    assert set(top) == {f"{VDI}/{m}" for m in ("read_iops", "write_iops", "queue_depth", "read_latency_ms")}, top
    assert all(row["direction"] == "up" for row in r["results"][:4])
    iops = [row for row in r["results"] if row["key"].endswith("_iops")]
    assert all(27 < row["change_pct"] < 31 for row in iops)           # x 1.30 from Monday 06:00 (SCENARIO #6)
    assert all(row["mean"] == pytest.approx(means[row["key"]], rel=1e-12) for row in r["results"])
    assert r["history_periods"] == 2 and r["sources"] == {"rollup": 0, "points": 9}
    assert r["new"] == [] and r["silent"] == [] and r["counters_scored"] == 86
    gap = next(row for row in r["results"] if row["key"].startswith(seed.GAP_HOST))
    assert "samples against a usual" in gap["note"]                     # the planted vdi-hv03 gap (#8)


@pytest.mark.parametrize("args,message", [
    (["--period", "2026-W11"], "history too short: 1 of the 8 periods before 2026-W11 hold samples"),
    (["--period", "2026-W30"], "no samples in the period 2026-W30"),
    (["--period", "2026-W12", "--from", "2026-03-16"], "give --period or --from/--to, not both"),
    (["--from", "2026-03-16"], "give --period"),
    (["--period", "2026-W12", "--history", "1"], "--history must be 2..520"),
])
def test_changes_bad_input_is_one_line(demo_home: Path, args: list[str], message: str) -> None:
    out = run("--home", str(demo_home), "changes", *args)
    assert out.exit_code == 1 and out.stderr.count("\n") == 1 and message in out.stderr, out.stderr


def _weekly_home(home: Path, tmp_path: Path) -> Path:
    """Five local weeks (Monday 2026-01-05 on, hourly): steady, jump (+20 in the last week),
    b_new (last week only), c_gone (all but the last week)."""
    rng = np.random.default_rng(3)
    start = np.datetime64("2026-01-04T23:00:00")                       # Monday 00:00 in Europe/Berlin (UTC+1)
    hours = np.arange(5 * 168)
    lines = ["time,metric,value"]
    for h in hours:
        stamp = f"{start + np.timedelta64(int(h), 'h')}Z"
        last = h >= 4 * 168
        daily = 10 * np.sin(2 * np.pi * h / 24)
        lines.append(f"{stamp},steady,{100 + daily + rng.normal():.4f}")
        lines.append(f"{stamp},jump,{100 + daily + rng.normal() + (20 if last else 0):.4f}")
        lines.append(f"{stamp},{'b_new' if last else 'c_gone'},{50 + rng.normal():.4f}")
    csv = tmp_path / "weeks.csv"
    csv.write_text("\n".join(lines) + "\n")
    (result,) = ingest_files(home, [csv], IngestOptions(host="h"))
    assert result.status == "loaded"
    return home


def test_changes_new_silent_and_the_jump(home: Path, tmp_path: Path) -> None:
    _weekly_home(home, tmp_path)
    with open_warehouse(home) as wh:
        r = find_changes(wh, ChangesRequest(period="2026-W06", history=4))
    assert [row["key"] for row in r["results"]] == ["h/jump", "h/steady"]
    jump = r["results"][0]
    assert jump["direction"] == "up" and jump["change"] == pytest.approx(20, abs=0.5) and jump["q"] < 0.05
    assert r["new"] == ["h/b_new"] and r["silent"] == ["h/c_gone"] and r["history_periods"] == 4


def test_changes_reads_complete_rollups_and_falls_back_to_points(home: Path, tmp_path: Path) -> None:
    """Filled rollup_week rows (the migration's table) give the same ranking as the raw points; a
    period whose rows are incomplete, or a rollup behind the ingests, is read from the points."""
    _weekly_home(home, tmp_path)
    req = ChangesRequest(period="2026-W06", history=4)
    with open_warehouse(home) as wh:
        raw = find_changes(wh, req)
        rows = wh.con.execute(
            """SELECT (date_trunc('week', ts AT TIME ZONE 'Europe/Berlin'))::DATE AS period_start, counter_id,
                      count(*) AS n, avg(value) AS mean, stddev_pop(value) AS sd, quantile_cont(value, 0.95) AS p95
               FROM points GROUP BY ALL""").fetchall()
        ingests = [r[0] for r in wh.con.execute("SELECT ingest_id FROM ingests").fetchall()]
    with writer(home) as con:
        for start, cid, n, mean, sd, p95 in rows:
            con.execute("INSERT INTO rollup_week VALUES (?, ?, ?, ?, ?, ?, 0, 0, 0, ?, 0, 0, 0, 0, 0, 3600, true,"
                        " now(), [])", [start, cid, n, n, mean, sd, p95])
        con.executemany("INSERT INTO rollup_seen VALUES ('week', ?, now())", [[i] for i in ingests])
    with open_warehouse(home) as wh:
        rolled = find_changes(wh, req)
    assert rolled["sources"] == {"rollup": 5, "points": 0}
    for a, b in zip(raw["results"], rolled["results"]):
        assert a["key"] == b["key"] and a["score"] == pytest.approx(b["score"], rel=1e-9)
    with writer(home) as con:
        con.execute("UPDATE rollup_week SET complete = false WHERE period_start = DATE '2026-02-02'")
    with open_warehouse(home) as wh:
        assert find_changes(wh, req)["sources"] == {"rollup": 4, "points": 1}
    with writer(home) as con:
        con.execute("DELETE FROM rollup_seen")
    with open_warehouse(home) as wh:
        assert find_changes(wh, req)["sources"] == {"rollup": 0, "points": 5}


def test_changes_table_fits_100_columns(demo_home: Path) -> None:
    out = run("--home", str(demo_home), "changes", "--period", "2026-W12", "--top", "30")
    assert out.exit_code == 0 and max(len(line) for line in out.output.splitlines()) <= 100
    out = run("--home", str(demo_home), "compare", f"{VDI}/write_iops", "--before", "2026-W11", "--after", "2026-W12")
    assert out.exit_code == 0 and max(len(line) for line in out.output.splitlines()) <= 100
    assert "verdict:" in out.output


def test_changes_reads_what_warehouse_rollup_wrote(home: Path, tmp_path: Path) -> None:
    """After `warehouse rollup --all --period week`, every period comes from rollup_week and the
    scores equal those from the points (the rollup's statistics are computed independently)."""
    _weekly_home(home, tmp_path)
    req = ChangesRequest(period="2026-W06", history=4)
    with open_warehouse(home) as wh:
        raw = find_changes(wh, req)
    assert run("--home", str(home), "rollup", "--all", "--period", "week").exit_code == 0
    with open_warehouse(home) as wh:
        rolled = find_changes(wh, req)
    assert rolled["sources"] == {"rollup": 5, "points": 0}
    assert [x["key"] for x in rolled["results"]] == [x["key"] for x in raw["results"]]
    for a, b in zip(raw["results"], rolled["results"]):
        assert a["score"] == pytest.approx(b["score"], rel=1e-9) and a["p95"] == pytest.approx(b["p95"], rel=1e-12)
    assert (rolled["new"], rolled["silent"]) == (raw["new"], raw["silent"])
