"""Rollups and trends on real warehouses: stored statistics against SQL and numpy, --due, open
periods, DST, a killed rollup, two rollups at once, and a planted growth found by `warehouse trend`."""
from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
import time
from datetime import date, datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from warehouse.cli import cli
from warehouse.errors import BusyError, WarehouseError
from warehouse.home import init_home, open_warehouse
from warehouse.ingest.run import IngestOptions, ingest_files
from warehouse.rollup import COLUMNS, RollupRequest, rollup
from warehouse.stats import moments
from warehouse.trend import TrendRequest, trend

ZONE = "Europe/Berlin"
STATS = ("n", "mean", "sd", "min", "max", "m2", "bound", "busiest_hour_mean")


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def _rows(home: Path, kind: str = "week") -> list[tuple]:
    with open_warehouse(home) as wh:
        return wh.con.execute(f"SELECT {', '.join(COLUMNS)} FROM rollup_{kind} ORDER BY period_start, counter_id").fetchall()


def _wide_csv(path: Path, start: datetime, hours: float, step_s: int, columns: dict[str, callable]) -> Path:
    """A wide CSV with UTC ('Z') times every `step_s` seconds; each column a function of seconds since start."""
    n = int(hours * 3600 // step_s)
    t = np.arange(n) * step_s
    stamps = [(start + timedelta(seconds=int(s))).strftime("%Y-%m-%dT%H:%M:%SZ") for s in t]
    values = {name: f(t) for name, f in columns.items()}
    lines = ["timestamp," + ",".join(columns)]
    lines += [stamps[i] + "," + ",".join(f"{values[c][i]:.3f}" for c in columns) for i in range(n)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _load(home: Path, path: Path, host: str = "h1") -> None:
    (res,) = ingest_files(home, [path], IngestOptions(source="lab", host=host))
    assert res.status == "loaded", res.message


def _noise(seed: int):
    rng = np.random.default_rng(seed)
    return lambda t: 50 + 20 * np.sin(2 * np.pi * t / 86400) + rng.gamma(2.0, 5.0, len(t))


# -- the stored statistics ---------------------------------------------------------------------------

@pytest.fixture(scope="module")
def demo_rolled(demo_home: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A copy of the demo warehouse (4 weeks at 1 min, Europe/Berlin, spring DST change), rolled up."""
    home = tmp_path_factory.mktemp("rolled") / "wh"
    shutil.copytree(demo_home, home)
    rollup(home, RollupRequest(("day", "week", "month"), "all"))
    return home


# Independent formulation: the period from DuckDB's own calendar functions in the session zone
# (ICU), where the rollup computes local midnights in Python and filters instants.
_REFERENCE = """
WITH s AS (SELECT counter_id, date_trunc('{kind}', ts)::DATE AS period_start, ts, value FROM points),
h AS (SELECT counter_id, period_start, max(hm) AS busiest FROM (
        SELECT counter_id, period_start, avg(value) AS hm FROM s GROUP BY counter_id, period_start, date_trunc('hour', ts))
      GROUP BY ALL),
a AS (SELECT counter_id, period_start, count(value) AS n, avg(value) AS mean, stddev_pop(value) AS sd, min(value) AS min,
       max(value) AS max, var_pop(value) * count(value) AS m2,
       avg(value) + sqrt(0.95 / 0.05) * stddev_pop(value) AS bound FROM s GROUP BY ALL)
SELECT a.*, h.busiest FROM a JOIN h USING (counter_id, period_start) ORDER BY period_start, counter_id"""


@pytest.mark.parametrize("kind", ["day", "week", "month"])
def test_every_stored_statistic_equals_sql_over_the_points(demo_rolled: Path, kind: str) -> None:
    """Reference: DuckDB aggregates grouped by date_trunc in the warehouse zone, to 1e-9."""
    with open_warehouse(demo_rolled) as wh:
        ref = wh.con.execute(_REFERENCE.format(kind=kind)).fetchall()
        got = wh.con.execute(f"""SELECT counter_id, period_start, n, mean, sd, min, max, m2, bound, busiest_hour_mean
            FROM rollup_{kind} ORDER BY period_start, counter_id""").fetchall()
        assert wh.con.execute(f"SELECT DISTINCT coverage FROM rollup_{kind}").fetchall() == [(0.95,)]
    assert len(got) == len(ref) > 0
    for r, g in zip(ref, got):
        assert g[:3] == r[:3]
        for name, want, have in zip(("mean", "sd", "min", "max"), r[3:7], g[3:7]):
            assert have == pytest.approx(want, rel=1e-9, abs=1e-9), (name, g[:2])
        assert g[7] == pytest.approx(r[7], rel=1e-9)
        assert g[8] == pytest.approx(r[8], rel=1e-9)
        assert g[9] == pytest.approx(r[9], rel=1e-9)


@pytest.mark.parametrize("kind", ["day", "week", "month"])
def test_stored_percentiles_equal_numpy_quantile(demo_rolled: Path, kind: str) -> None:
    """Reference: numpy.quantile (method 'linear', its default) on the same period's values, and
    the M2 against numpy's sum of squared deviations."""
    with open_warehouse(demo_rolled) as wh:
        picks = wh.con.execute(f"""SELECT period_start, counter_id, p50, p95, p99, m2 FROM rollup_{kind}
                                  USING SAMPLE 12 ROWS (reservoir, 7)""").fetchall()
        for start, cid, p50, p95, p99, m2 in picks:
            x = np.array([v for (v,) in wh.con.execute(
                f"SELECT value FROM points WHERE counter_id = ? AND date_trunc('{kind}', ts)::DATE = ?",
                [cid, start]).fetchall()])
            assert (p50, p95, p99) == pytest.approx(tuple(np.quantile(x, [0.5, 0.95, 0.99])), rel=1e-12)
            assert m2 == pytest.approx(((x - x.mean()) ** 2).sum(), rel=1e-9)


def test_weeks_combined_with_chan_equal_the_raw_four_weeks(demo_rolled: Path) -> None:
    """The four weekly rows of a counter merged with Chan et al.'s formulas equal the statistics of
    the raw points of those four weeks (reference: DuckDB aggregates over samples)."""
    with open_warehouse(demo_rolled) as wh:
        for cid in (1, 17, 40):
            n, mean, m2, lo, hi = (np.array(c) for c in zip(*wh.con.execute(
                "SELECT n, mean, m2, min, max FROM rollup_week WHERE counter_id = ? ORDER BY period_start",
                [cid]).fetchall()))
            merged = moments.combine(n, mean, m2, lo, hi)
            rn, rmean, rsd, rmin, rmax = wh.con.execute(
                "SELECT count(value), avg(value), stddev_pop(value), min(value), max(value) FROM points"
                " WHERE counter_id = ? AND ts >= TIMESTAMPTZ '2026-03-02 00:00:00+01'"
                " AND ts < TIMESTAMPTZ '2026-03-30 00:00:00+02'", [cid]).fetchone()
            assert len(n) == 4 and merged.n == rn
            assert merged.mean == pytest.approx(rmean, rel=1e-12)
            assert merged.sd_pop == pytest.approx(rsd, rel=1e-9)
            assert (merged.min, merged.max) == (rmin, rmax)


def test_dst_week_and_day_of_the_demo_expect_one_hour_less(demo_rolled: Path) -> None:
    """Common practice: the spring change (29 March 2026 in Europe/Berlin) makes a 23 h day and a 167 h week."""
    with open_warehouse(demo_rolled) as wh:
        weeks = dict(wh.con.execute("SELECT period_start, max(expected_n) FROM rollup_week GROUP BY 1").fetchall())
        days = dict(wh.con.execute("SELECT period_start, max(expected_n) FROM rollup_day GROUP BY 1").fetchall())
    assert weeks[date(2026, 3, 16)] == 168 * 60 and weeks[date(2026, 3, 23)] == 167 * 60
    assert days[date(2026, 3, 28)] == 24 * 60 and days[date(2026, 3, 29)] == 23 * 60


def test_rollup_tables_answer_sql(demo_rolled: Path) -> None:
    result = run("--home", str(demo_rolled), "sql",
                 "SELECT count(*) AS weeks FROM rollup_week r JOIN counters c USING (counter_id)"
                 " WHERE c.key = 'san01/pool=vdi/read_iops'", "--format", "csv")
    assert result.exit_code == 0 and result.output == "weeks\n4\n"


# -- DST on generated data ---------------------------------------------------------------------------

def test_weeks_across_both_dst_changes_expect_the_right_samples(home: Path, tmp_path: Path) -> None:
    """Common practice (Europe/Berlin 2026): clocks go forward on 29 March and back on 25 October, so
    those days have 23 h and 25 h and their ISO weeks 167 h and 169 h; at 15 min that is 92 / 100
    samples a day and 668 / 676 a week, against 96 and 672 otherwise."""
    cols = {"cpu_util": _noise(1)}
    _load(home, _wide_csv(tmp_path / "spring.csv", datetime(2026, 3, 15, 23, tzinfo=timezone.utc), 21 * 24, 900, cols))
    _load(home, _wide_csv(tmp_path / "autumn.csv", datetime(2026, 10, 11, 22, tzinfo=timezone.utc), 21 * 24, 900, cols))
    rollup(home, RollupRequest(("day", "week"), "all"))
    with open_warehouse(home) as wh:
        weeks = dict(wh.con.execute("SELECT period_start, expected_n FROM rollup_week WHERE complete").fetchall())
        days = dict(wh.con.execute("SELECT period_start, expected_n FROM rollup_day WHERE complete").fetchall())
        full = wh.con.execute("SELECT period_start, n FROM rollup_week WHERE complete AND n = expected_n").fetchall()
    assert weeks[date(2026, 3, 16)] == 672 and weeks[date(2026, 3, 23)] == 668
    assert weeks[date(2026, 10, 19)] == 676 and weeks[date(2026, 10, 12)] == 672
    assert days[date(2026, 3, 29)] == 92 and days[date(2026, 10, 25)] == 100 and days[date(2026, 3, 30)] == 96
    assert {d for d, _ in full} >= {date(2026, 3, 23), date(2026, 10, 19)}


# -- due, idempotent, open periods -------------------------------------------------------------------

@pytest.fixture
def lab(home: Path, tmp_path: Path) -> Path:
    """Two counters at 5 min from Monday 2 March 2026 00:00 local to Wednesday 25 March 12:00 local."""
    start = datetime(2026, 3, 1, 23, tzinfo=timezone.utc)
    _load(home, _wide_csv(tmp_path / "a.csv", start, 23 * 24 + 12, 300,
                          {"cpu_util": _noise(2), "disk_queue": _noise(3)}))
    return home


def test_same_rollup_twice_leaves_identical_rows(lab: Path) -> None:
    first = rollup(lab, RollupRequest(("week",), "all"))
    rows = _rows(lab)
    assert first[0]["rows"] == len(rows) == 8
    assert len({(r[0], r[1]) for r in rows}) == len(rows)
    again = rollup(lab, RollupRequest(("week",), "all"))
    rows2 = _rows(lab)
    strip = lambda rs: [r[:-2] + r[-1:] for r in rs]   # noqa: E731  (all but computed_at)
    assert strip(rows2) == strip(rows) and again[0]["rows"] == 8
    nothing = rollup(lab, RollupRequest(("week",), "due"))
    assert nothing[0]["periods"] == 0 and _rows(lab) == rows2


def test_concurrent_queries_give_the_rows_of_one_query_at_a_time(lab: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Blocks of counters run several at once (each on one DuckDB thread): the stored rows must be
    bit-identical to running the same blocks one after another."""
    import warehouse.rollup as rollup_module

    strip = lambda rs: [r[:-2] + r[-1:] for r in rs]   # noqa: E731  (all but computed_at)
    monkeypatch.setattr(rollup_module, "QUERY_THREADS", 1)
    rollup(lab, RollupRequest(("day", "week"), "all"), budget=500)   # one counter per query
    serial = strip(_rows(lab, "day")) + strip(_rows(lab, "week"))
    monkeypatch.setattr(rollup_module, "QUERY_THREADS", 3)
    rollup(lab, RollupRequest(("day", "week"), "all"), budget=500)
    assert strip(_rows(lab, "day")) + strip(_rows(lab, "week")) == serial
    assert len(serial) == 2 * (24 + 4)   # two counters: 24 local days, 4 ISO weeks


def test_partial_week_is_open_until_later_data_closes_it(lab: Path, tmp_path: Path) -> None:
    rollup(lab, RollupRequest(("week",), "due"))
    rows = {(r[0], r[1]): dict(zip(COLUMNS, r)) for r in _rows(lab)}
    last = rows[(date(2026, 3, 23), 1)]
    assert not last["complete"] and last["n"] == (2 * 24 + 12) * 12 and last["expected_n"] == 167 * 12
    assert all(r["complete"] for (d, _), r in rows.items() if d < date(2026, 3, 23))
    _load(lab, _wide_csv(tmp_path / "b.csv", datetime(2026, 3, 25, 11, tzinfo=timezone.utc), 7 * 24, 300,
                         {"cpu_util": _noise(4), "disk_queue": _noise(5)}))
    summary = rollup(lab, RollupRequest(("week",), "due"))
    assert (summary[0]["first_period"], summary[0]["last_period"]) == (date(2026, 3, 23), date(2026, 3, 30))
    closed = {(r[0], r[1]): dict(zip(COLUMNS, r)) for r in _rows(lab)}[(date(2026, 3, 23), 1)]
    assert closed["complete"] and closed["n"] == closed["expected_n"] == 167 * 12
    assert len(closed["ingest_ids"]) == 2


def test_due_after_a_late_file_for_an_old_week_recomputes_only_that_week(lab: Path, tmp_path: Path) -> None:
    rollup(lab, RollupRequest(("week", "month"), "due"))
    before = {(r[0], r[1]): r for r in _rows(lab)}
    late = _wide_csv(tmp_path / "late.csv", datetime(2026, 3, 8, 23, tzinfo=timezone.utc), 7 * 24, 300,
                     {"cpu_util": _noise(6)})
    _load(lab, late, host="h2")
    summary = rollup(lab, RollupRequest(("week",), "due"))
    assert summary[0]["periods"] == 2                   # the old week, and the open last week
    after = {(r[0], r[1]): r for r in _rows(lab)}
    assert set(after) - set(before) == {(date(2026, 3, 9), 3)}
    ci = COLUMNS.index("computed_at")
    assert after[(date(2026, 3, 2), 1)] == before[(date(2026, 3, 2), 1)]
    assert after[(date(2026, 3, 16), 2)] == before[(date(2026, 3, 16), 2)]
    assert after[(date(2026, 3, 9), 1)][ci] > before[(date(2026, 3, 9), 1)][ci]
    assert after[(date(2026, 3, 9), 3)][COLUMNS.index("n")] == 7 * 24 * 12
    with open_warehouse(lab) as wh:       # the month kind has not seen the late file yet
        due = wh.con.execute("SELECT count(*) FROM ingests WHERE ingest_id NOT IN"
                             " (SELECT ingest_id FROM rollup_seen WHERE period = 'month')").fetchone()[0]
    assert due == 1


def test_due_notices_a_deleted_ingest(lab: Path, tmp_path: Path) -> None:
    _load(lab, _wide_csv(tmp_path / "x.csv", datetime(2026, 3, 8, 23, tzinfo=timezone.utc), 24, 300,
                         {"cpu_util": _noise(7)}), host="h3")
    rollup(lab, RollupRequest(("week",), "due"))
    assert len(_rows(lab)) == 9
    result = run("--home", str(lab), "sql", "--write", "DELETE FROM ingest_files WHERE ingest_id IN"
                 " (SELECT ingest_id FROM ingests WHERE path LIKE '%x.csv');"
                 " DELETE FROM ingests WHERE path LIKE '%x.csv'")
    assert result.exit_code == 0, result.output
    rollup(lab, RollupRequest(("week",), "due"))
    assert len(_rows(lab)) == 8


def test_since_rebuilds_from_the_period_holding_the_date(lab: Path) -> None:
    rollup(lab, RollupRequest(("week",), "all"))
    before = _rows(lab)
    time.sleep(0.01)
    summary = rollup(lab, RollupRequest(("week",), "since", "2026-03-18"))
    assert summary[0]["first_period"] == date(2026, 3, 16) and summary[0]["periods"] == 2
    after = _rows(lab)
    ci = COLUMNS.index("computed_at")
    assert [r[ci] for r in after[:4]] == [r[ci] for r in before[:4]]
    assert all(a[ci] > b[ci] for a, b in zip(after[4:], before[4:]))


def test_cli_nothing_due_is_one_line_and_exit_0(lab: Path) -> None:
    first = run("--home", str(lab), "rollup", "--period", "week", "--period", "day")
    assert first.exit_code == 0
    assert re.match(r"rollup --due: week: 4 period\(s\) 2026-03-02 \.\. 2026-03-23, 8 rows, 2 still open;"
                    r" day: 24 period\(s\) 2026-03-02 \.\. 2026-03-25, 48 rows, 2 still open \(\d+\.\d s\)\n$",
                    first.output), first.output
    again = run("--home", str(lab), "rollup", "--due", "--period", "week")
    assert again.exit_code == 0 and re.match(r"rollup --due: week: nothing due \(\d+\.\d s\)\n$", again.output)
    as_json = run("--home", str(lab), "rollup", "--all", "--format", "json")
    assert json.loads(as_json.output)["rollups"][0] | {"seconds": 0} == {
        "period": "week", "mode": "all", "periods": 4, "rows": 8, "incomplete_rows": 2,
        "first_period": "2026-03-02", "last_period": "2026-03-23", "seconds": 0}


def test_cli_rollup_bad_options(lab: Path) -> None:
    bad = run("--home", str(lab), "rollup", "--since", "last tuesday")
    assert bad.exit_code == 1 and bad.stderr.strip() == "Error: cannot read date 'last tuesday': use YYYY-MM-DD, e.g. 2026-03-02"
    both = run("--home", str(lab), "rollup", "--all", "--since", "2026-03-02")
    assert both.exit_code == 2 and "--since cannot go with --due or --all" in both.output
    with open_warehouse(lab) as wh:
        assert wh.con.execute("SELECT count(*) FROM rollup_week").fetchone()[0] == 0
    none = run("--home", str(lab), "trend", "h1/cpu_util")
    assert none.exit_code == 1
    assert none.stderr.strip() == "Error: no weekly rollups for 'h1/cpu_util': run `warehouse rollup` first"


def test_bad_coverage_setting_is_one_clear_error(lab: Path) -> None:
    assert run("--home", str(lab), "sql", "--write",
               "UPDATE settings SET value = '95' WHERE name = 'rollup_coverage'").exit_code == 0
    with pytest.raises(WarehouseError, match="rollup_coverage must be a number between 0 and 1, got '95'"):
        rollup(lab, RollupRequest(("week",), "all"))


# -- concurrency and crashes -------------------------------------------------------------------------

_HOLD = """
import sys, time
from pathlib import Path
from warehouse.rollup import rollup_lock
with rollup_lock(Path(sys.argv[1])):
    print("ready", flush=True)
    time.sleep(float(sys.argv[2]))
"""


def test_second_rollup_waits_then_says_busy_naming_the_holder(lab: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("WAREHOUSE_LOCK_WAIT", "0.5")
    holder = subprocess.Popen([sys.executable, "-c", _HOLD, str(lab), "30"], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        with pytest.raises(BusyError, match=rf"busy: another rollup \(process {holder.pid}\) is running"):
            rollup(lab, RollupRequest(("week",), "all"))
    finally:
        holder.kill()
        holder.wait()
    short = subprocess.Popen([sys.executable, "-c", _HOLD, str(lab), "0.5"], stdout=subprocess.PIPE, text=True)
    try:
        assert short.stdout.readline().strip() == "ready"
        monkeypatch.setenv("WAREHOUSE_LOCK_WAIT", "20")
        assert rollup(lab, RollupRequest(("week",), "all"))[0]["rows"] == 8     # it waited its turn
    finally:
        short.wait()


_KILLED = """
import os, signal, sys
from pathlib import Path
import warehouse.rollup as r
store = r._store
def store_then_die(con, plan, rows):
    store(con, plan, rows)                  # old rows deleted and new ones inserted, not committed
    print("stored", flush=True)
    os.kill(os.getpid(), signal.SIGKILL)
r._store = store_then_die
r.rollup(Path(sys.argv[1]), r.RollupRequest(("week",), "all"))
"""


@pytest.mark.slow
def test_rollup_killed_half_way_leaves_the_previous_rows(lab: Path, tmp_path: Path) -> None:
    rollup(lab, RollupRequest(("week",), "all"))
    before = _rows(lab)
    _load(lab, _wide_csv(tmp_path / "more.csv", datetime(2026, 3, 8, 23, tzinfo=timezone.utc), 24, 300,
                         {"cpu_util": _noise(8)}), host="h4")
    killed = subprocess.run([sys.executable, "-c", _KILLED, str(lab)], capture_output=True, text=True, timeout=120)
    assert killed.returncode == -9 and killed.stdout.strip() == "stored"
    assert _rows(lab) == before
    summary = rollup(lab, RollupRequest(("week",), "due"))
    assert summary[0]["periods"] == 2 and len(_rows(lab)) == 9


# -- trend ---------------------------------------------------------------------------------------------

def test_trend_finds_the_week_a_planted_growth_reaches_capacity(home: Path, tmp_path: Path) -> None:
    """Generated: hourly samples growing 10 units per week from 100, plus a daily swing and noise,
    for 14 weeks from Monday 5 January 2026. The weekly mean is 105 + 10 w, so it reaches 300 in
    week 19.5 after the first: the reported week must be within one week of that."""
    rng = np.random.default_rng(12)
    week_s = 7 * 86400
    grow = lambda t: 100 + 10 * t / week_s + 8 * np.sin(2 * np.pi * t / 86400) + rng.normal(0, 3, len(t))  # noqa: E731
    _load(home, _wide_csv(tmp_path / "g.csv", datetime(2026, 1, 4, 23, tzinfo=timezone.utc), 14 * 7 * 24, 3600,
                          {"sessions": grow}))
    rollup(home, RollupRequest(("week",), "due"))
    with open_warehouse(home) as wh:
        r = trend(wh, TrendRequest("h1/sessions", "mean", capacity=300.0))
    (s,) = r["series"]
    fit = s["fit"]
    assert fit["weeks_used"] == 14 and fit["slope_per_week"] == pytest.approx(10.0, abs=0.3)
    assert fit["slope_low"] <= fit["slope_per_week"] <= fit["slope_high"]
    truth = date(2026, 1, 5) + timedelta(days=round(19.5 * 7))
    c = fit["crossing"]
    assert c["status"] == "ahead" and abs((c["week"] - truth).days) <= 7
    assert c["week_early"] <= c["week"] <= c["week_late"]
    assert any("extrapolates" in x for x in r["cautions"])

    out = run("--home", str(home), "trend", "h1/sessions", "--stat", "mean", "--capacity", "300")
    assert out.exit_code == 0
    assert f"reaches 300: week of {c['week'].isoformat()} [{c['week_early'].isoformat()} .. " in out.output
    assert all(len(line) <= 100 for line in out.output.splitlines())
    as_json = json.loads(run("--home", str(home), "trend", "h1/sessions", "--format", "json").output)
    assert set(as_json) == {"selector", "stat", "combine", "confidence", "capacity", "horizon_weeks", "series", "cautions"}
    assert as_json["series"][0]["fit"]["slope_per_week"] > 0


def test_trend_combined_and_open_weeks(lab: Path) -> None:
    """Combined series: weekly p95 of the per-minute sum from the points; the open last week is shown
    but not fitted; with 2 closed weeks there is no line (fewer than 3)."""
    rollup(lab, RollupRequest(("week",), "due"))
    with open_warehouse(lab) as wh:
        r = trend(wh, TrendRequest("h1/*", "p95", combine="sum"))
        (s,) = r["series"]
        assert [w["complete"] for w in s["weeks"]] == [True, True, True, False]
        summed = [v for (v,) in wh.con.execute(
            "SELECT sum(value) FROM points WHERE ts < TIMESTAMPTZ '2026-03-09 00:00:00+01' GROUP BY ts").fetchall()]
    assert s["weeks"][0]["value"] == pytest.approx(np.quantile(summed, 0.95), rel=1e-12)   # numpy, linear
    assert s["fit"] is not None and s["fit"]["weeks_used"] == 3
