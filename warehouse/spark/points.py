"""The committed points as a Spark DataFrame, and the SQL of the mergeable statistics."""
from __future__ import annotations

from pathlib import Path
from typing import Any
from urllib.parse import unquote, urlparse

from warehouse.errors import WarehouseError
from warehouse.home import Warehouse

# The points files' columns (warehouse/ingest/write.py); given, so Spark reads no footer to infer them.
SCHEMA = "ts TIMESTAMP, counter_id INT, value DOUBLE"
US = 1_000_000
DAY_US = 86_400 * US


def read_points(spark: Any, home: Path, relpaths: list[str]) -> Any:
    """counter_id, ts (an instant), ts_us (UTC microseconds), value and file_path of the listed
    files; rows without a value are left out. Only these files are read: an orphan left by a crash
    is never seen, as with DuckDB."""
    if not relpaths:
        raise WarehouseError("no committed points files in the range")
    frame = spark.read.schema(SCHEMA).parquet(*[str(home / r) for r in relpaths])
    return frame.where("value IS NOT NULL").selectExpr(
        "counter_id", "ts", "unix_micros(ts) AS ts_us", "value", "_metadata.file_path AS file_path")


def files_in(wh: Warehouse, start_us: int, end_us: int) -> list[str]:
    """Committed files whose UTC day overlaps [start_us, end_us) (and any without a day)."""
    rows = wh.con.execute(
        "SELECT relpath FROM ingest_files WHERE day IS NULL OR (epoch_us(day::TIMESTAMP) < ?"
        " AND epoch_us(day::TIMESTAMP) + ? > ?) ORDER BY relpath", [end_us, DAY_US, start_us]).fetchall()
    return [r for (r,) in rows]


def local_path(uri: str) -> str:
    """The file-system path of a file URI as Spark reports it (file:/a/b%20c -> /a/b c)."""
    return unquote(urlparse(uri).path) if ":" in uri.split("/", 1)[0] else uri


def moments_sql(x: str) -> str:
    """Count, mean, population variance, min and max of column `x`, as SQL select items.

    Spark aggregates each partition into a buffer (n, mean, M2) and merges buffers with the
    parallel formulas of Chan, Golub and LeVeque (its central-moment aggregate; noted from
    memory, and checked in tests/test_spark.py on uneven partitions and NIST StRD NumAcc4), so the
    variance never comes from a naive sum of squares."""
    return (f"count({x}) AS n, avg({x}) AS mean, var_pop({x}) AS var, min({x}) AS lo, max({x}) AS hi")


def comoments_sql(x: str, y: str) -> str:
    """Overlap count, Pearson r and the ranges of `x` and `y` over rows where both are present.

    Spark's correlation keeps per-partition co-moments (n, means, C_xy, M2_x, M2_y) merged with
    the same parallel formulas; the ranges tell a constant side (r undefined) exactly."""
    return (f"count(*) AS n, corr({x}, {y}) AS r, min({x}) AS x_lo, max({x}) AS x_hi,"
            f" min({y}) AS y_lo, max({y}) AS y_hi")
