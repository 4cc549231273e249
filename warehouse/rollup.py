"""`warehouse rollup`: one summary row per counter and local day, ISO week or month, kept current.

The work happens in three steps, so that queries and ingests are never held up by a long rollup:
1. a rollup lock (a file lock of its own) lets one rollup run at a time; a second waits up to
   $WAREHOUSE_LOCK_WAIT seconds, then says the warehouse is busy, naming the holder;
2. the statistics are computed from a read-only snapshot of the catalog, one period and one block
   of counters per query (memory bounded by POINTS_PER_QUERY points per query), reading only the
   day partitions that overlap the period; QUERY_THREADS queries run at once, each on its own
   connection and on one DuckDB thread, so the rows are bit-identical from run to run;
3. one short catalog transaction deletes the periods recomputed and inserts their rows, and
   records the ingests taken in. A rollup killed before that commit changes nothing.
"""
from __future__ import annotations

import math
import os
import threading
import time
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta, timezone
from datetime import time as clock
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pyarrow as pa

from warehouse.errors import BusyError, WarehouseError
from warehouse.home import Warehouse, lock_wait_seconds, open_warehouse, writer
from warehouse.sql import quote_literal

PERIODS = ("day", "week", "month")
POINTS_PER_QUERY = 16_000_000
# Queries run at once. Each runs on one DuckDB thread, so its sums meet in one fixed order and the
# rows are the same bit for bit in every run; the parallelism comes from running several.
QUERY_THREADS = min(2, os.cpu_count() or 1)
LOCK_FILE = "rollup.lock"
DEFAULT_COVERAGE = 0.95
COLUMNS = ("period_start", "counter_id", "n", "expected_n", "mean", "sd", "min", "max", "p50", "p95", "p99",
           "bound", "coverage", "busiest_hour_mean", "m2", "interval_s", "complete", "computed_at", "ingest_ids")
SUMMARY_KEYS = ("period", "mode", "periods", "rows", "incomplete_rows", "first_period", "last_period", "seconds")


@dataclass(frozen=True)
class RollupRequest:
    periods: tuple[str, ...] = ("week",)
    mode: str = "due"                  # 'due', 'all' or 'since'
    since: str | None = None           # a local date, with mode 'since'


@dataclass
class Plan:
    """What one kind of rollup will recompute, delete and record."""
    kind: str
    starts: list[date]
    replace_from: date | None = None   # mode 'since': every row from this period on goes
    replace_all: bool = False
    seen: list[str] = field(default_factory=list)


# -- periods in local time -------------------------------------------------------------------------

def period_of(kind: str, day: date) -> date:
    """The first day of the period holding `day`: itself, its ISO Monday, or the 1st of its month."""
    if kind == "day":
        return day
    if kind == "week":
        return day - timedelta(days=day.weekday())
    return day.replace(day=1)


def next_period(kind: str, start: date) -> date:
    if kind == "day":
        return start + timedelta(days=1)
    if kind == "week":
        return start + timedelta(days=7)
    return date(start.year + start.month // 12, start.month % 12 + 1, 1)


def local_midnight(day: date, zone: str) -> datetime:
    """The instant (UTC) the local day begins. Where midnight itself is skipped by a clock change,
    the offset before the change maps it onto the change, the first instant of that day."""
    return datetime.combine(day, clock(), ZoneInfo(zone)).astimezone(timezone.utc)


def periods_between(kind: str, first: datetime, last: datetime, zone: str) -> list[date]:
    """Starts of every period from the one holding `first` to the one holding `last` (instants)."""
    zi = ZoneInfo(zone)
    start = period_of(kind, first.astimezone(zi).date())
    stop = period_of(kind, last.astimezone(zi).date())
    out = []
    while start <= stop:
        out.append(start)
        start = next_period(kind, start)
    return out


# -- the lock ----------------------------------------------------------------------------------------

@contextmanager
def rollup_lock(home: Path) -> Iterator[None]:
    """One rollup at a time per home; the OS drops the lock if the holder dies."""
    import fcntl

    path = home / LOCK_FILE
    handle = open(path, "a+", encoding="utf-8")
    deadline = time.monotonic() + lock_wait_seconds()
    try:
        while True:
            try:
                fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    handle.seek(0)
                    holder = handle.read().strip() or "unknown"
                    raise BusyError(f"the warehouse at {home} is busy: another rollup (process {holder}) is"
                                    " running; try again when it finishes") from None
                time.sleep(0.05)
        handle.seek(0)
        handle.truncate()
        handle.write(str(os.getpid()))
        handle.flush()
        yield
    finally:
        handle.close()


# -- planning ----------------------------------------------------------------------------------------

def _check(req: RollupRequest) -> None:
    unknown = [p for p in req.periods if p not in PERIODS]
    if unknown or not req.periods:
        raise WarehouseError(f"unknown rollup period {', '.join(unknown) or '(none)'}: use day, week or month")
    if req.mode not in ("due", "all", "since"):
        raise WarehouseError(f"unknown rollup mode {req.mode!r}: use --due, --all or --since DATE")
    if (req.mode == "since") != (req.since is not None):
        raise WarehouseError("--since needs a date, e.g. --since 2026-03-02")


def parse_since(text: str) -> date:
    try:
        return date.fromisoformat(text.strip())
    except ValueError:
        raise WarehouseError(f"cannot read date {text!r}: use YYYY-MM-DD, e.g. 2026-03-02") from None


def _ingest_spans(wh: Warehouse) -> list[tuple[str, datetime, datetime]]:
    return wh.con.execute(
        "SELECT ingest_id, first_ts, last_ts FROM ingests WHERE first_ts IS NOT NULL ORDER BY first_ts").fetchall()


def plan(wh: Warehouse, kind: str, req: RollupRequest) -> Plan:
    """The periods one kind of rollup must recompute for `req`, and the ingests it takes in."""
    spans = _ingest_spans(wh)
    every = [i for (i,) in wh.con.execute("SELECT ingest_id FROM ingests").fetchall()]
    if req.mode == "all":
        starts = {s for _, a, b in spans for s in periods_between(kind, a, b, wh.zone)}
        return Plan(kind, sorted(starts), replace_all=True, seen=every)
    if req.mode == "since":
        first = period_of(kind, parse_since(req.since or ""))
        starts = {s for _, a, b in spans for s in periods_between(kind, a, b, wh.zone) if s >= first}
        taken = {i for i, a, _ in spans if a >= local_midnight(first, wh.zone)}
        return Plan(kind, sorted(starts), replace_from=first, seen=sorted(taken))
    return _plan_due(wh, kind, spans, every)


def _plan_due(wh: Warehouse, kind: str, spans: list[tuple[str, datetime, datetime]], every: list[str]) -> Plan:
    """Periods touched by ingests this kind has not taken in, periods whose rows name an ingest
    that is gone (replaced or deleted), and, when anything new was loaded, the periods still open
    (new data may close them even if it does not touch them)."""
    table = f"rollup_{kind}"
    seen = {i for (i,) in wh.con.execute("SELECT ingest_id FROM rollup_seen WHERE period = ?", [kind]).fetchall()}
    new = [i for i in every if i not in seen]
    starts = {s for i, a, b in spans if i not in seen for s in periods_between(kind, a, b, wh.zone)}
    stale = wh.con.execute(f"""
        SELECT DISTINCT period_start FROM (SELECT period_start, unnest(ingest_ids) AS i FROM {table})
        WHERE i NOT IN (SELECT ingest_id FROM ingests)
        UNION SELECT DISTINCT period_start FROM {table} WHERE NOT complete AND $new""", {"new": bool(new)}).fetchall()
    starts |= {s for (s,) in stale}
    return Plan(kind, sorted(starts), seen=new)


# -- computing ---------------------------------------------------------------------------------------

def _coverage(wh: Warehouse) -> float:
    row = wh.con.execute("SELECT value FROM settings WHERE name = 'rollup_coverage'").fetchone()
    try:
        p = float(row[0]) if row else DEFAULT_COVERAGE
    except ValueError:
        p = math.nan
    if not 0 < p < 1:
        raise WarehouseError(f"setting rollup_coverage must be a number between 0 and 1, got {row[0]!r}")
    return p


def _horizons(wh: Warehouse) -> None:
    """Per counter, the latest time its source has loaded: a period ending later is still open."""
    # A table of the in-memory snapshot, not a TEMP one: the other connections of the same
    # database (one per concurrent query) see it too.
    wh.con.execute("""CREATE OR REPLACE TABLE rollup_horizon AS
        SELECT d.counter_id, epoch_us(max(i.last_ts)) AS horizon_us
        FROM counter_defs d JOIN ingests i USING (source_id) GROUP BY d.counter_id""")


_STATS_SQL = """
WITH p AS (
    SELECT counter_id, ts, value, file_index FROM read_parquet({files})
    WHERE ts >= $lo AND ts < $hi AND counter_id BETWEEN $cid_lo AND $cid_hi AND value IS NOT NULL),
hours AS (
    SELECT counter_id, avg(value) AS hour_mean,
           (epoch_us(max(ts)) - epoch_us(min(ts))) / 1e6 / nullif(count(value) - 1, 0) AS spacing
    FROM p GROUP BY counter_id, (epoch_us(ts) + $shift_us) // 3600000000),
per_hour AS (
    SELECT counter_id, max(hour_mean) AS busiest_hour_mean, median(spacing) AS spacing FROM hours GROUP BY ALL),
agg AS (
    SELECT counter_id, count(value) AS n, avg(value) AS mean, var_pop(value) AS var, min(value) AS lo,
           max(value) AS hi, quantile_cont(value, [0.5, 0.95, 0.99]) AS q, list(DISTINCT file_index) AS files,
           (epoch_us(max(ts)) - epoch_us(min(ts))) / 1e6 / nullif(count(value) - 1, 0) AS spread
    FROM p GROUP BY ALL),
shaped AS (
    SELECT a.*, h.busiest_hour_mean, coalesce(h.spacing, a.spread) AS interval_s, r.horizon_us
    FROM agg a JOIN per_hour h USING (counter_id) LEFT JOIN rollup_horizon r USING (counter_id))
"""

# The stored row from the per-counter statistics of one period (relation `shaped`: counter_id, n,
# mean, var, lo, hi, q = [p50, p95, p99], files = indexes into $ingests, busiest_hour_mean,
# interval_s, horizon_us). Shared by every engine, so each derives the columns the same way.
ROWS_SQL = """
SELECT $start::DATE AS period_start, counter_id, n,
       CASE WHEN interval_s > 0 THEN round($seconds / interval_s)::BIGINT END AS expected_n,
       mean, sqrt(var) AS sd, lo AS min, hi AS max, q[1] AS p50, q[2] AS p95, q[3] AS p99,
       mean + $k * sqrt(var) AS bound, $coverage AS coverage, busiest_hour_mean, var * n AS m2, interval_s,
       coalesce(horizon_us + 1.5e6 * coalesce(interval_s, 0) >= $hi_us, false) AS complete,
       $now::TIMESTAMPTZ AS computed_at,
       list_sort(list_distinct(list_transform(files, lambda i: ($ingests::VARCHAR[])[i::BIGINT + 1]))) AS ingest_ids
FROM shaped ORDER BY counter_id"""
_PERIOD_SQL = _STATS_SQL + ROWS_SQL


def _files_for(wh: Warehouse, lo: datetime, hi: datetime) -> list[tuple[str, str, int]]:
    """Committed files whose UTC day overlaps [lo, hi): relative path, ingest id, points."""
    last = (hi - timedelta(microseconds=1)).date()
    return wh.con.execute(
        "SELECT relpath, ingest_id, rows FROM ingest_files WHERE day BETWEEN ? AND ? ORDER BY relpath",
        [lo.date(), last]).fetchall()


files_for = _files_for   # for other engines: the same file choice per period


def _counter_blocks(wh: Warehouse, points: int, budget: int) -> list[tuple[int, int]]:
    """Counter id ranges so that one query holds about `budget` points at most."""
    lo, hi = wh.con.execute("SELECT min(counter_id), max(counter_id) FROM counter_defs").fetchone()
    if lo is None:
        return []
    blocks = max(1, min(math.ceil(points / budget), hi - lo + 1))
    edges = [lo + round(i * (hi - lo + 1) / blocks) for i in range(blocks + 1)]
    return [(a, b - 1) for a, b in zip(edges, edges[1:]) if b > a]


def period_bounds(kind: str, start: date, zone: str) -> tuple[datetime, datetime]:
    """The instants (UTC) a period begins and ends: [lo, hi)."""
    return local_midnight(start, zone), local_midnight(next_period(kind, start), zone)


def hour_shift_us(lo: datetime, zone: str) -> int:
    """What aligns clock hours to the zone (its offset's part below an hour), in microseconds."""
    return int(lo.astimezone(ZoneInfo(zone)).utcoffset().total_seconds()) % 3600 * 1_000_000  # type: ignore[union-attr]


def rows_params(start: date, lo: datetime, hi: datetime, *, coverage: float, now: datetime,
                ingests: list[str]) -> dict[str, Any]:
    """The parameters of ROWS_SQL for one period; `ingests` is what the `files` indexes name."""
    return {"hi_us": int(hi.timestamp() * 1_000_000), "start": start, "seconds": (hi - lo).total_seconds(),
            "k": math.sqrt(coverage / (1 - coverage)), "coverage": coverage, "now": now, "ingests": ingests}


def period_queries(wh: Warehouse, kind: str, start: date, *, coverage: float, now: datetime,
                   budget: int = POINTS_PER_QUERY) -> list[tuple[str, dict[str, Any]]]:
    """The queries (SQL, parameters) that give the rows of one period, one per block of counters."""
    lo, hi = period_bounds(kind, start, wh.zone)
    files = _files_for(wh, lo, hi)
    if not files:
        return []
    listing = "[" + ", ".join(quote_literal(str(wh.home / f)) for f, _, _ in files) + "]"
    sql = _PERIOD_SQL.format(files=listing)
    params: dict[str, Any] = {
        "lo": lo, "hi": hi, "shift_us": hour_shift_us(lo, wh.zone),
        **rows_params(start, lo, hi, coverage=coverage, now=now, ingests=[i for _, i, _ in files])}
    return [(sql, dict(params, cid_lo=cid_lo, cid_hi=cid_hi))
            for cid_lo, cid_hi in _counter_blocks(wh, sum(r for _, _, r in files), budget)]


def run_queries(wh: Warehouse, queries: list[tuple[str, dict[str, Any]]],
                threads: int | None = None) -> list[pa.Table]:
    """Run the queries, `threads` at a time on connections of their own; tables in query order.

    Each connection runs its query on one DuckDB thread (the caller sets `threads = 1`), so a
    query's result does not depend on what runs beside it."""
    threads = QUERY_THREADS if threads is None else threads
    wh.con.complete()   # sql() refuses to start while an execute() result is still open
    if threads <= 1 or len(queries) <= 1:
        tables = [wh.con.sql(sql, params=params).to_arrow_table() for sql, params in queries]
    else:
        local = threading.local()
        cursors = []

        def run(query: tuple[str, dict[str, Any]]) -> pa.Table:
            con = getattr(local, "con", None)
            if con is None:
                con = local.con = wh.con.cursor()
                cursors.append(con)
            return con.sql(query[0], params=query[1]).to_arrow_table()

        try:
            with ThreadPoolExecutor(threads) as pool:
                tables = list(pool.map(run, queries))
        finally:
            for con in cursors:
                con.close()
    return [t for t in tables if t.num_rows]


# -- writing -----------------------------------------------------------------------------------------

def _store(con: Any, plan_: Plan, rows: pa.Table | None) -> None:
    table = f"rollup_{plan_.kind}"
    if plan_.replace_all:
        con.execute(f"DELETE FROM {table}")
    elif plan_.replace_from is not None:
        con.execute(f"DELETE FROM {table} WHERE period_start >= ?", [plan_.replace_from])
    elif plan_.starts:
        con.execute(f"DELETE FROM {table} WHERE list_contains(?::DATE[], period_start)", [plan_.starts])
    if rows is not None and rows.num_rows:
        con.register("rollup_staged", rows)
        try:
            names = ", ".join(COLUMNS)
            con.execute(f"INSERT INTO {table} ({names}) SELECT {names} FROM rollup_staged")
        finally:
            con.unregister("rollup_staged")
    con.execute("DELETE FROM rollup_seen WHERE period = ? AND ingest_id NOT IN (SELECT ingest_id FROM ingests)",
                [plan_.kind])
    if plan_.seen:
        con.execute("INSERT INTO rollup_seen SELECT ?, unnest(?::VARCHAR[]), now() ON CONFLICT DO NOTHING",
                    [plan_.kind, plan_.seen])


def _summary(plan_: Plan, rows: pa.Table | None, seconds: float, mode: str) -> dict[str, Any]:
    n = rows.num_rows if rows is not None else 0
    incomplete = n - int(pa.compute.sum(rows["complete"]).as_py() or 0) if n else 0
    return {"period": plan_.kind, "mode": mode, "periods": len(plan_.starts), "rows": n,
            "incomplete_rows": incomplete, "first_period": plan_.starts[0] if plan_.starts else None,
            "last_period": plan_.starts[-1] if plan_.starts else None, "seconds": round(seconds, 3)}


# How an engine computes the rows of a plan: (warehouse, plan, coverage, now) -> Arrow tables with
# the COLUMNS of the rollup tables. The default reads the points with DuckDB, one period at a time.
ComputePlan = Callable[[Warehouse, Plan, float, datetime], list[pa.Table]]


def compute_plan(wh: Warehouse, plan_: Plan, coverage: float, now: datetime, *,
                 budget: int = POINTS_PER_QUERY) -> list[pa.Table]:
    """Every period of a plan, with DuckDB (QUERY_THREADS queries at a time)."""
    return run_queries(wh, [q for s in plan_.starts
                            for q in period_queries(wh, plan_.kind, s, coverage=coverage, now=now, budget=budget)])


def rollup(home: Path, req: RollupRequest, *, budget: int = POINTS_PER_QUERY,
           compute: ComputePlan | None = None) -> list[dict[str, Any]]:
    """Recompute what `req` asks for and store it in one transaction; a summary per period kind.

    `compute` replaces the DuckDB engine (planning, the lock and the write stay the same)."""
    import pyarrow.compute  # noqa: F401  (pa.compute in _summary)

    _check(req)
    if req.since is not None:
        parse_since(req.since)
    with rollup_lock(home):
        t0 = time.perf_counter()
        now = datetime.now(timezone.utc)
        with open_warehouse(home) as wh:
            # One thread per query: parallel partial sums meet in any order and change the last
            # bits of mean and sd from run to run; the same rollup must give bit-identical rows.
            # Several queries run at once instead (run_queries).
            wh.con.execute("SET threads = 1")
            coverage = _coverage(wh)
            _horizons(wh)
            work = []
            for kind in dict.fromkeys(req.periods):
                p = plan(wh, kind, req)
                parts = (compute(wh, p, coverage, now) if compute is not None
                         else compute_plan(wh, p, coverage, now, budget=budget))
                work.append((p, pa.concat_tables(parts) if parts else None))
        with writer(home) as con:
            con.execute("BEGIN TRANSACTION")
            try:
                for p, rows in work:
                    _store(con, p, rows)
                con.execute("COMMIT")
            except BaseException:
                con.execute("ROLLBACK")
                raise
        seconds = time.perf_counter() - t0
    return [_summary(p, rows, seconds, req.mode) for p, rows in work]

