"""Aligned series on Spark: bucket means, the combined series, and target-vs-all co-moments.

Buckets are those of warehouse.series.Grid (aligned to the epoch, UTC); a bucket's value is the
mean of the samples inside it, as in the DuckDB engine. What comes back to the driver is the
size of the answer: one value per bucket (combined series), or one r and n per counter and lag
plus one lag-1 autocorrelation per counter.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from warehouse.home import Warehouse
from warehouse.series import Combined, Grid
from warehouse.spark.points import comoments_sql, files_in, read_points


def _ids_frame(spark: Any, ids: list[int]) -> Any:
    return spark.createDataFrame([(int(i),) for i in ids], "counter_id INT")


def bucket_means(spark: Any, wh: Warehouse, ids: list[int], grid: Grid) -> Any:
    """DataFrame (counter_id, b, v): the mean of each counter's samples in bucket b of the grid
    (b = 0..grid.n-1); buckets without a sample have no row."""
    from pyspark.sql import functions as F

    points = read_points(spark, wh.home, files_in(wh, grid.start_us, grid.end_us))
    points = points.where((F.col("ts_us") >= grid.start_us) & (F.col("ts_us") < grid.end_us))
    points = points.join(F.broadcast(_ids_frame(spark, ids)), "counter_id", "left_semi")
    b = F.floor((F.col("ts_us") - F.lit(grid.start_us)) / F.lit(grid.bucket_us)).cast("int")
    return points.groupBy("counter_id", b.alias("b")).agg((F.sum("value") / F.count("value")).alias("v"))


def combined(spark: Any, wh: Warehouse, ids: list[int], grid: Grid, how: str) -> Combined:
    """Sum, mean or max across counters at each bucket (warehouse.series.combine, on Spark)."""
    from pyspark.sql import functions as F

    per_bucket = (bucket_means(spark, wh, ids, grid).groupBy("b")
                  .agg(F.sum("v").alias("total"), F.count("v").alias("present"), F.max("v").alias("peak"))
                  .toArrow())
    b = per_bucket.column("b").to_numpy()
    total, peak = np.zeros(grid.n), np.full(grid.n, -np.inf)
    present = np.zeros(grid.n, dtype=np.int64)
    total[b] = per_bucket.column("total").to_numpy()
    peak[b] = per_bucket.column("peak").to_numpy()
    present[b] = per_bucket.column("present").to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        values = {"sum": total, "mean": total / present, "max": peak}[how]
    return Combined(grid, np.where(present > 0, values, np.nan), present, len(ids))


def target_series(spark: Any, wh: Warehouse, ids: list[int], grid: Grid) -> np.ndarray:
    """The target: its counters' bucket means summed per bucket, NaN where none had a sample."""
    return combined(spark, wh, ids, grid, "sum").values


@dataclass(frozen=True)
class TargetCorrelations:
    """What Spark returns for target-vs-all: r and overlap n per (lag, counter), and each counter's
    lag-1 autocorrelation, laid out as warehouse.stats.correlate.lagged_corr lays them out."""
    r: np.ndarray       # (2L+1, m), NaN where undefined
    n: np.ndarray       # (2L+1, m) int64
    lags: np.ndarray    # (2L+1,)
    r1: np.ndarray      # (m,)


# Average ranks over each counter's own buckets: the lowest rank of a run of ties plus half the
# run's length less one (scipy.stats.rankdata(method="average")).
_RANKED = """SELECT counter_id, b,
    rank() OVER (PARTITION BY counter_id ORDER BY v) + (count(*) OVER (PARTITION BY counter_id, v) - 1) / 2 AS v
    FROM wh_means"""

# r1 = sum d_t d_{t-1} / sum d_t^2, d = x - mean over the counter's present buckets; the numerator
# over consecutive buckets both present; 0 where undefined (warehouse.stats.correlate.lag1_autocorrelation).
_LAG1 = """
WITH c AS (SELECT counter_id, b, v - avg(v) OVER (PARTITION BY counter_id) AS d FROM wh_x),
l AS (SELECT counter_id, b, d, lag(d) OVER (PARTITION BY counter_id ORDER BY b) AS d_prev,
             lag(b) OVER (PARTITION BY counter_id ORDER BY b) AS b_prev FROM c),
s AS (SELECT counter_id, count(*) AS n, sum(d * d) AS den,
             sum(CASE WHEN b_prev = b - 1 THEN d * d_prev END) AS num,
             count(CASE WHEN b_prev = b - 1 THEN 1 END) AS pairs
      FROM l GROUP BY counter_id),
r AS (SELECT counter_id, min(v) AS lo, max(v) AS hi FROM wh_x GROUP BY counter_id)
SELECT s.counter_id, CASE WHEN n >= 3 AND pairs >= 1 AND hi > lo AND den > 0
                          THEN greatest(-1D, least(1D, num / den)) ELSE 0D END AS r1
FROM s JOIN r ON s.counter_id = r.counter_id"""

# r_k = corr(x[t - k], y[t]): the target at bucket t meets the counter at bucket t - k.
_LAGGED = """
SELECT /*+ BROADCAST(y) */ x.counter_id, y.lag, {comoments}
FROM wh_x x JOIN (SELECT t.b - l.lag AS s, l.lag, t.y FROM wh_y t CROSS JOIN wh_lags l) y ON x.b = y.s
GROUP BY x.counter_id, y.lag"""


def target_correlations(spark: Any, wh: Warehouse, y: np.ndarray, ids: list[int], grid: Grid, *,
                        spearman: bool, max_lag: int) -> TargetCorrelations:
    """Pearson r of the prepared target `y` (one value per bucket, NaN where absent; already
    ranked for Spearman) with every counter of `ids` (ranked here per counter when `spearman`),
    at lags -max_lag..max_lag, pairwise complete; and each counter's lag-1 autocorrelation."""
    means = bucket_means(spark, wh, ids, grid)
    means.createOrReplaceTempView("wh_means")
    x = spark.sql(_RANKED) if spearman else means
    x = x.selectExpr("counter_id", "b", "CAST(v AS DOUBLE) AS v").persist()
    try:
        x.createOrReplaceTempView("wh_x")
        have = np.flatnonzero(np.isfinite(y))
        spark.createDataFrame([(int(b), float(y[b])) for b in have], "b INT, y DOUBLE").createOrReplaceTempView("wh_y")
        lags = np.arange(-max_lag, max_lag + 1, dtype=np.int64)
        spark.createDataFrame([(int(k),) for k in lags], "lag INT").createOrReplaceTempView("wh_lags")
        pairs = spark.sql(_LAGGED.format(comoments=comoments_sql("x.v", "y.y"))).toArrow()
        r1_rows = spark.sql(_LAG1).toArrow()
    finally:
        x.unpersist()
    column = {cid: j for j, cid in enumerate(ids)}
    r = np.full((lags.size, len(ids)), np.nan)
    n = np.zeros((lags.size, len(ids)), dtype=np.int64)
    if pairs.num_rows:
        j = np.array([column[c] for c in pairs.column("counter_id").to_pylist()])
        k = pairs.column("lag").to_numpy() + max_lag
        got = {name: pairs.column(name).to_numpy(zero_copy_only=False).astype(float)
               for name in ("n", "r", "x_lo", "x_hi", "y_lo", "y_hi")}
        defined = (got["n"] >= 3) & (got["x_hi"] > got["x_lo"]) & (got["y_hi"] > got["y_lo"])
        n[k, j] = got["n"].astype(np.int64)
        r[k, j] = np.where(defined, np.clip(got["r"], -1.0, 1.0), np.nan)
    r1 = np.zeros(len(ids))
    if r1_rows.num_rows:
        r1[[column[c] for c in r1_rows.column("counter_id").to_pylist()]] = r1_rows.column("r1").to_numpy()
    return TargetCorrelations(r=r, n=n, lags=lags, r1=r1)
