"""The one reader that turns (selector, time range, bucket) into aligned arrays.

Only the selected counters are read (the Parquet files are sorted by counter, so row groups of
other counters are skipped) and they are read in blocks of counters, so memory is bounded by the
block, not by how many counters match. Buckets are aligned to the epoch (UTC) and hold the mean
of the samples inside them.
"""
from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from warehouse.catalog import match_counters
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.timeutil import parse_when

BLOCK_COUNTERS = 256
US = 1_000_000


@dataclass(frozen=True)
class Counter:
    counter_id: int
    key: str
    host: str
    counter: str
    unit: str


@dataclass(frozen=True)
class Grid:
    """Buckets [start + i*bucket, start + (i+1)*bucket) for i in range(n), in UTC microseconds."""

    start_us: int
    bucket_us: int
    n: int

    @property
    def times(self) -> np.ndarray:
        return self.start_us + np.arange(self.n, dtype=np.int64) * self.bucket_us

    @property
    def end_us(self) -> int:
        return self.start_us + self.n * self.bucket_us

    @property
    def bucket_seconds(self) -> int:
        return self.bucket_us // US


def select(wh: Warehouse, selector: str) -> list[Counter]:
    """The counters a selector (key or glob) names, in key order."""
    ids = match_counters(wh, selector)
    rows = wh.con.execute(
        "SELECT counter_id, key, host, counter, unit FROM counters"
        " WHERE counter_id IN (SELECT unnest($ids::INTEGER[])) ORDER BY key, counter_id", {"ids": ids}).fetchall()
    return [Counter(*r) for r in rows]


def _id_filter(ids: list[int]) -> str:
    # The BETWEEN lets row-group statistics skip other counters before the IN list is checked.
    return "counter_id BETWEEN $lo AND $hi AND counter_id IN (SELECT unnest($ids::INTEGER[]))"


def time_range(wh: Warehouse, ids: list[int], start_us: int | None, end_us: int | None) -> tuple[int, int]:
    """The requested range, with open ends filled from the data; raises if nothing is inside."""
    lo, hi = wh.con.execute(
        f"SELECT epoch_us(min(ts)), epoch_us(max(ts)) FROM points WHERE {_id_filter(ids)}"
        " AND ts >= make_timestamptz($a) AND ts < make_timestamptz($b)",
        {"ids": ids, "lo": min(ids), "hi": max(ids), "a": start_us if start_us is not None else -(2**62),
         "b": end_us if end_us is not None else 2**62}).fetchone()
    if lo is None:
        raise WarehouseError("no samples of the selected counters in the time range")
    return (start_us if start_us is not None else lo, end_us if end_us is not None else hi + 1)


def user_range(wh: Warehouse, ids: list[int], start: str | None, end: str | None) -> tuple[int, int]:
    """--from/--to as typed (local in the warehouse zone unless they carry an offset), checked,
    with open ends filled from the data."""
    lo = parse_when(start, wh.zone) if start else None
    hi = parse_when(end, wh.zone) if end else None
    if lo is not None and hi is not None and hi <= lo:
        raise WarehouseError(f"empty time range: --to {end} is not after --from {start}")
    return time_range(wh, ids, lo, hi)


def grid_for(start_us: int, end_us: int, bucket_seconds: int) -> Grid:
    bucket = bucket_seconds * US
    first = (start_us // bucket) * bucket
    n = int(-(-(end_us - first) // bucket))
    return Grid(first, bucket, max(n, 1))


def bucket_block(wh: Warehouse, ids: list[int], grid: Grid) -> np.ndarray:
    """Bucket means, shape (grid.n, len(ids)), NaN where a counter has no sample in a bucket.

    The grid's whole buckets are read, so a bucket holds every sample inside it even where the
    requested range began or ended inside the bucket."""
    res = wh.con.execute(
        f"""SELECT counter_id, (epoch_us(ts) - $g0) // $b AS k, avg(value) AS v FROM points
            WHERE {_id_filter(ids)} AND ts >= make_timestamptz($a) AND ts < make_timestamptz($z)
            GROUP BY ALL""",
        {"ids": ids, "lo": min(ids), "hi": max(ids), "g0": grid.start_us, "b": grid.bucket_us,
         "a": grid.start_us, "z": grid.end_us}).fetchnumpy()
    out = np.full((grid.n, len(ids)), np.nan)
    if len(res["k"]):
        # counter id -> column through a lookup array: one vectorised step, not one per row
        first = min(ids)
        column = np.empty(max(ids) - first + 1, dtype=np.int64)
        column[np.asarray(ids, dtype=np.int64) - first] = np.arange(len(ids))
        cols = column[np.asarray(res["counter_id"], dtype=np.int64) - first]
        out[np.asarray(res["k"], dtype=np.int64), cols] = np.asarray(res["v"], dtype=np.float64)
    return out


def blocks(wh: Warehouse, ids: list[int], grid: Grid,
           size: int = BLOCK_COUNTERS) -> Iterator[tuple[list[int], np.ndarray]]:
    """Aligned bucket means for `ids`, a block of counters at a time."""
    for lo in range(0, len(ids), size):
        part = ids[lo:lo + size]
        yield part, bucket_block(wh, part, grid)


@dataclass(frozen=True)
class Combined:
    """Counters combined per bucket: values (NaN where none had data) and how many had data."""

    grid: Grid
    values: np.ndarray
    present: np.ndarray
    counters: int


def combine(wh: Warehouse, ids: list[int], grid: Grid, how: str) -> Combined:
    """Sum, mean or max across counters at each bucket, streaming blocks of counters."""
    if how not in {"sum", "mean", "max"}:
        raise WarehouseError(f"unknown combine {how!r}: use sum, mean or max")
    total = np.zeros(grid.n)
    peak = np.full(grid.n, -np.inf)
    present = np.zeros(grid.n, dtype=np.int64)
    for _, block in blocks(wh, ids, grid):
        seen = ~np.isnan(block)
        present += seen.sum(axis=1)
        total += np.where(seen, block, 0.0).sum(axis=1)
        peak = np.maximum(peak, np.where(seen, block, -np.inf).max(axis=1))
    with np.errstate(invalid="ignore", divide="ignore"):
        values = {"sum": total, "mean": total / present, "max": peak}[how]
    values = np.where(present > 0, values, np.nan)
    return Combined(grid, values, present, len(ids))
