"""Rollup rows computed by Spark: one job per period kind, every planned period at once.

Spark reduces the points of the planned periods to one row of statistics per (counter, period):
n, mean, variance, min and max (moments_sql: per-partition buffers merged with Chan et al.'s
formulas), p50/p95/p99 and the hourly figures. The driver then shapes the stored row with the
DuckDB engine's own ROWS_SQL (expected_n, sd, bound, m2, complete, ingest_ids), so both engines
derive every column the same way, and warehouse/rollup.py writes it in the same transaction.

Quantiles: Spark's `percentile` is exact (linear interpolation between order statistics, as
numpy's default and DuckDB's quantile_cont), but holds each group's distinct values in memory.
Where one (counter, period) holds more than EXACT_QUANTILE_POINTS points, the rollup uses
`percentile_approx` instead: an observed value whose rank lies within n / APPROX_ACCURACY of the
exact quantile's rank (Spark's documented relative error 1 / accuracy).
"""
from __future__ import annotations

from datetime import date, datetime
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.compute as pc

from warehouse.home import Warehouse
from warehouse.rollup import ROWS_SQL, Plan, files_for, hour_shift_us, period_bounds, rows_params
from warehouse.spark.points import local_path, moments_sql, read_points

EXACT_QUANTILE_POINTS = 5_000_000
APPROX_ACCURACY = 100_000
QUANTILES = "array(0.5D, 0.95D, 0.99D)"

_PERIOD_OF = {
    "day": "to_date(from_utc_timestamp(ts, :zone))",
    "week": "trunc(to_date(from_utc_timestamp(ts, :zone)), 'week')",      # ISO weeks begin on Monday
    "month": "trunc(to_date(from_utc_timestamp(ts, :zone)), 'month')",
}

_STATS_SQL = """
WITH p AS (
    SELECT /*+ BROADCAST(r) */ x.counter_id, x.ts_us, x.value, x.file_path, r.period_start, r.shift_us
    FROM (SELECT counter_id, ts_us, value, file_path, {period_of} AS period_start FROM wh_points) x
    JOIN wh_periods r ON x.period_start = r.period_start AND x.ts_us >= r.lo_us AND x.ts_us < r.hi_us),
hours AS (
    SELECT counter_id, period_start, avg(value) AS hour_mean,
           (max(ts_us) - min(ts_us)) / 1e6 / nullif(count(value) - 1, 0) AS spacing
    FROM p GROUP BY counter_id, period_start, div(ts_us + shift_us, 3600000000)),
per_hour AS (
    SELECT counter_id, period_start, max(hour_mean) AS busiest_hour_mean, percentile(spacing, 0.5D) AS spacing
    FROM hours GROUP BY counter_id, period_start),
agg AS (
    SELECT counter_id, period_start, {moments}, {quantiles} AS q, collect_set(file_path) AS paths,
           (max(ts_us) - min(ts_us)) / 1e6 / nullif(count(value) - 1, 0) AS spread
    FROM p GROUP BY counter_id, period_start)
SELECT a.counter_id, a.period_start, a.n, a.mean, a.var, a.lo, a.hi, a.q, a.paths,
       h.busiest_hour_mean, coalesce(h.spacing, a.spread) AS interval_s
FROM agg a JOIN per_hour h ON a.counter_id = h.counter_id AND a.period_start = h.period_start"""


def quantile_sql(exact: bool) -> str:
    return (f"percentile(value, {QUANTILES})" if exact
            else f"percentile_approx(value, {QUANTILES}, {APPROX_ACCURACY})")


class PlanOnSpark:
    """A rollup `compute` (see warehouse.rollup.rollup) that runs on `spark`. `exact` forces the
    quantile path; by default it is exact when no (counter, period) holds more than `limit` points.
    It remembers which period kinds took the approximate path, to say so beside the figures."""

    def __init__(self, spark: Any, *, exact: bool | None = None, limit: int = EXACT_QUANTILE_POINTS) -> None:
        self.spark, self.exact, self.limit = spark, exact, limit
        self.approximate: list[str] = []

    def __call__(self, wh: Warehouse, plan_: Plan, coverage: float, now: datetime) -> list[pa.Table]:
        return _compute(self, wh, plan_, coverage, now)

    def cautions(self, kind: str) -> list[str]:
        if kind not in self.approximate:
            return []
        return [f"p50, p95 and p99 of these {kind} rows are approximate (Spark's percentile_approx: an observed"
                f" value whose rank is within n/{APPROX_ACCURACY:,} of the exact quantile's), because a counter's"
                f" {kind} held more than {self.limit:,} points; trends and sizes read from them inherit that."]


def compute_plan(spark: Any, *, exact: bool | None = None, limit: int = EXACT_QUANTILE_POINTS) -> PlanOnSpark:
    return PlanOnSpark(spark, exact=exact, limit=limit)


def _largest_group(spark: Any, period_of: str, zone: str) -> int:
    """The most points any (counter, period) holds: a pass over two columns only."""
    sql = _STATS_SQL.split("hours AS")[0].rstrip().rstrip(",") + (
        "\nSELECT coalesce(max(c), 0) AS most FROM (SELECT count(*) AS c FROM p GROUP BY counter_id, period_start)")
    return int(spark.sql(sql.format(period_of=period_of), args={"zone": zone}).first()["most"])


def _compute(job: PlanOnSpark, wh: Warehouse, plan_: Plan, coverage: float, now: datetime) -> list[pa.Table]:
    spark, exact, limit = job.spark, job.exact, job.limit
    bounds = {s: period_bounds(plan_.kind, s, wh.zone) for s in plan_.starts}
    files = sorted({f for lo, hi in bounds.values() for f in files_for(wh, lo, hi)})
    if not files:
        return []
    periods = spark.createDataFrame(
        [(s, int(lo.timestamp() * 1e6), int(hi.timestamp() * 1e6), hour_shift_us(lo, wh.zone))
         for s, (lo, hi) in bounds.items()],
        "period_start DATE, lo_us BIGINT, hi_us BIGINT, shift_us BIGINT")
    periods.createOrReplaceTempView("wh_periods")
    read_points(spark, wh.home, [f for f, _, _ in files]).createOrReplaceTempView("wh_points")
    period_of = _PERIOD_OF[plan_.kind]
    if exact is None:
        # Every group fits when all the points read do; otherwise count the largest group first.
        exact = sum(r for _, _, r in files) <= limit or _largest_group(spark, period_of, wh.zone) <= limit
    if not exact:
        job.approximate.append(plan_.kind)
    sql = _STATS_SQL.format(period_of=period_of, moments=moments_sql("value"), quantiles=quantile_sql(exact))
    stats = spark.sql(sql, args={"zone": wh.zone}).toArrow()
    if not stats.num_rows:
        return []
    stats = _with_file_indexes(stats, {str((wh.home / f).resolve()): i for i, (f, _, _) in enumerate(files)})
    return _shape(wh, stats, bounds, coverage, now, [i for _, i, _ in files])


def _with_file_indexes(stats: pa.Table, index: dict[str, int]) -> pa.Table:
    """Replace the file URIs Spark reports by their positions in the plan's file list."""
    paths = stats.column("paths").combine_chunks()
    flat = [index[_resolved(p)] for p in paths.flatten().to_pylist()]
    offsets = pc.subtract(paths.offsets, paths.offsets[0])      # a slice's offsets need not start at 0
    files = pa.ListArray.from_arrays(offsets, pa.array(flat, pa.int64()))
    return stats.drop_columns(["paths"]).append_column("files", files)


def _resolved(uri: str) -> str:
    return str(Path(local_path(uri)).resolve())


def _shape(wh: Warehouse, stats: pa.Table, bounds: dict[date, tuple[datetime, datetime]], coverage: float,
           now: datetime, ingests: list[str]) -> list[pa.Table]:
    """The stored rows, period by period, through the DuckDB engine's ROWS_SQL."""
    out = []
    wh.con.complete()
    wh.con.register("spark_rollup_stats", stats)
    try:
        for start in sorted(set(pc.unique(stats.column("period_start")).to_pylist())):
            lo, hi = bounds[start]
            sql = ("WITH shaped AS (SELECT s.* EXCLUDE (period_start), r.horizon_us FROM spark_rollup_stats s"
                   " LEFT JOIN rollup_horizon r USING (counter_id) WHERE s.period_start = $start)" + ROWS_SQL)
            params = rows_params(start, lo, hi, coverage=coverage, now=now, ingests=ingests)
            table = wh.con.sql(sql, params=params).to_arrow_table()
            if table.num_rows:
                out.append(table)
    finally:
        wh.con.unregister("spark_rollup_stats")
    return out
