"""The one reader that turns (selector, time range, bucket) into aligned arrays.

Only the selected counters are read (the Parquet files are sorted by counter, so row groups of
other counters are skipped) and they are read in blocks of counters, so memory is bounded by the
block, not by how many counters match. Buckets are aligned to the epoch (UTC) and hold the mean
of the samples inside them.

The reader does not ask DuckDB to group: a GROUP BY over every (counter, bucket) is a hash
aggregate with millions of groups, and it was most of the time of every analysis. Instead the raw
columns are read with pyarrow and, because each file is sorted by (counter, time), every bucket of
a counter is one run of rows whose sum NumPy takes in one pass (np.add.reduceat).
"""
from __future__ import annotations

import os
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from warehouse.catalog import match_counters
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.timeutil import parse_when

BLOCK_COUNTERS = 256
US = 1_000_000
DAY_US = 86_400 * US
# Files read and reduced at once; pyarrow and NumPy release the GIL while they work.
READ_THREADS = min(4, os.cpu_count() or 1)
_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)


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


def time_range(wh: Warehouse, ids: list[int], start_us: int | None, end_us: int | None,
               files: _Files | None = None) -> tuple[int, int]:
    """The requested range, with open ends filled from the data; raises if nothing is inside.

    A row group that holds only selected counters and lies inside the range gives its first and
    last time from its statistics without being read; only row groups shared with other counters
    (or cut by the range) have their id and time columns read."""
    a = start_us if start_us is not None else -(2**62)
    b = end_us if end_us is not None else 2**62
    lo, hi = _data_range(files or _Files.of(wh), ids, a, b)
    if lo is None or hi is None:
        raise WarehouseError("no samples of the selected counters in the time range")
    return (start_us if start_us is not None else lo, end_us if end_us is not None else hi + 1)


def _data_range(files: _Files, ids: list[int], a: int, b: int) -> tuple[int | None, int | None]:
    """First and last sample time of `ids` in [a, b), in UTC microseconds (None when none)."""
    sel = _Selection(ids)
    first, last = sel.first, sel.last
    lo: int | None = None
    hi: int | None = None
    partial: list[tuple[str, list[int]]] = []
    for rel, groups in files.wanted(sel, Grid(a, b - a, 1)):
        stats = files.stats(rel)
        shared = []
        for g in groups:
            c0, c1, t0, t1 = stats[g]
            inside = sel.count(c0, c1) == c1 - c0 + 1   # only selected ids in the row group
            if inside and t0 >= a and t1 < b:
                lo = t0 if lo is None else min(lo, t0)
                hi = t1 if hi is None else max(hi, t1)
            elif lo is None or hi is None or t0 < lo or t1 > hi:
                shared.append(g)   # may move an end: read it
        if shared:
            partial.append((rel, shared))
    for rel, groups in partial:
        table = pq.ParquetFile(files.home / rel, metadata=files.meta.get(rel)).read_row_groups(
            groups, columns=["counter_id", "ts"], use_threads=False)
        cid = table.column("counter_id").to_numpy().astype(np.int64, copy=False)
        ts = table.column("ts").cast(pa.int64()).to_numpy()
        keep = (ts >= a) & (ts < b) & (cid >= first) & (cid <= last)
        keep[keep] = sel.flag[cid[keep] - first + 1] == 1
        if keep.any():
            t = ts[keep]
            lo = int(t.min()) if lo is None else min(lo, int(t.min()))
            hi = int(t.max()) if hi is None else max(hi, int(t.max()))
    return lo, hi


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


class _Selection:
    """A set of counter ids, with a prefix count that says how many of them lie in any id span."""

    def __init__(self, ids: list[int] | np.ndarray) -> None:
        self.ids = np.unique(np.asarray(ids, dtype=np.int64))
        self.first, self.last = int(self.ids[0]), int(self.ids[-1])
        flag = np.zeros(self.last - self.first + 2, dtype=np.int64)
        flag[self.ids - self.first + 1] = 1
        self.flag = flag            # flag[id - first + 1] == 1 for a selected id
        self.prefix = np.cumsum(flag)

    def count(self, c0: int, c1: int) -> int:
        """How many selected ids lie in [c0, c1]."""
        lo, hi = max(c0, self.first), min(c1, self.last)
        if hi < lo:
            return 0
        return int(self.prefix[hi - self.first + 1] - self.prefix[lo - self.first])


class _Files:
    """The committed Parquet files with their row-group statistics, read once per command.

    Each file is sorted by (counter_id, ts), so the (min, max) of both columns per row group tell
    which row groups can hold a block of counters inside the grid; the rest are never read."""

    def __init__(self, wh: Warehouse) -> None:
        self.home = wh.home
        self.files = wh.con.execute(
            "SELECT relpath, epoch_us(day::TIMESTAMP) FROM ingest_files ORDER BY relpath").fetchall()
        self._stats: dict[str, list[tuple[int, int, int, int]]] = {}
        self.meta: dict[str, pq.FileMetaData] = {}

    @staticmethod
    def of(wh: Warehouse) -> "_Files":
        """The snapshot's file list, shared by every read on this warehouse object."""
        files = wh.cache.get("series.files")
        if files is None:
            files = wh.cache["series.files"] = _Files(wh)
        return files

    def stats(self, relpath: str) -> list[tuple[int, int, int, int]]:
        """(counter_id min, max, ts min, max) in UTC microseconds per row group."""
        got = self._stats.get(relpath)
        if got is None:
            meta = self.meta[relpath] = pq.ParquetFile(self.home / relpath).metadata
            names = [meta.schema.column(i).name for i in range(meta.num_columns)]
            c, t = names.index("counter_id"), names.index("ts")
            got = []
            for i in range(meta.num_row_groups):
                rg = meta.row_group(i)
                cs, ts = rg.column(c).statistics, rg.column(t).statistics
                if cs is None or ts is None or not cs.has_min_max or not ts.has_min_max:
                    got.append((-(2**62), 2**62, -(2**62), 2**62))  # no statistics: always read
                else:
                    got.append((cs.min, cs.max, _epoch_us(ts.min), _epoch_us(ts.max)))
            self._stats[relpath] = got
        return got

    def wanted(self, sel: _Selection, grid: Grid) -> list[tuple[str, list[int]]]:
        """Files and row groups that may hold selected counters inside the grid."""
        out = []
        for relpath, day_us in self.files:
            # a partition holds one UTC day; skip days outside the grid before opening the file
            if day_us is not None and (day_us >= grid.end_us or day_us + DAY_US <= grid.start_us):
                continue
            groups = [i for i, (c0, c1, t0, t1) in enumerate(self.stats(relpath))
                      if t1 >= grid.start_us and t0 < grid.end_us and sel.count(c0, c1) > 0]
            if groups:
                out.append((relpath, groups))
        return out


def _epoch_us(value: object) -> int:
    if isinstance(value, datetime):
        delta = value - _EPOCH if value.tzinfo else value - _EPOCH.replace(tzinfo=None)
        return (delta.days * 86_400 + delta.seconds) * US + delta.microseconds
    return int(value)  # type: ignore[call-overload]


# Largest (counters x buckets) window one file is reduced into at once (float64 sums + counts).
WINDOW_CELLS = 1 << 21
# Bytes of bucket means in one block when the caller leaves the block width to the reader.
BLOCK_BYTES = 160 << 20
MAX_BLOCK_COUNTERS = 4096


def block_width(grid: Grid, size: int | None = None) -> int:
    """Counters per block: `size`, else as many as BLOCK_BYTES of means hold (at least BLOCK_COUNTERS)."""
    if size is not None:
        return max(1, size)
    return int(min(MAX_BLOCK_COUNTERS, max(BLOCK_COUNTERS, BLOCK_BYTES // (8 * max(grid.n, 1)))))


@dataclass(frozen=True)
class _Window:
    """Sums and counts of one file over scan columns [c0, c0 + rows) and buckets [b0, b0 + cols)."""

    c0: int
    b0: int
    sums: np.ndarray      # (rows, cols)
    counts: np.ndarray    # (rows, cols)

    @property
    def c1(self) -> int:
        return self.c0 + self.sums.shape[0]


@dataclass(frozen=True)
class _Runs:
    """Sums and counts of one file per flat cell ((column - p0) * grid.n + bucket), cells increasing."""

    cells: np.ndarray
    sums: np.ndarray
    counts: np.ndarray


def _reduce_file(path: Path, meta: pq.FileMetaData | None, groups: list[int], column: np.ndarray, first: int,
                 grid: Grid, p0: int, p1: int,
                 stats: list[tuple[int, int, int, int]] | None = None) -> _Window | _Runs | None:
    """Sums and counts per (column, bucket) cell of the rows of some row groups of one file.

    `column` maps counter ids (from `first`) to scan columns, -1 for ids not asked for. The block
    being built holds columns [p0, p1). A file usually covers a short stretch of time for many
    counters, so its cells fit a small dense window (columns x buckets) that one np.bincount pass
    sums, whatever the row order; the window keeps the columns after p1 too (the next blocks take
    them, so these row groups are never read again). A file whose window would be large falls
    back to runs of the block's columns only: the file is sorted by (counter_id, ts) and columns
    increase with ids, so each cell is one run of rows and np.add.reduceat sums the runs.

    `stats` (the groups' id and time ranges) spare passes over the rows: when every row is known
    to be wanted, no mask is built and the window's corners come from the statistics."""
    table = pq.ParquetFile(path, metadata=meta).read_row_groups(groups, columns=["counter_id", "ts", "value"],
                                                                use_threads=False)
    if not table.num_rows:
        return None
    cid = table.column("counter_id").to_numpy()
    ts = table.column("ts").cast(pa.int64()).to_numpy()
    value = table.column("value").to_numpy()
    known = stats is not None and all(-(2**62) < st[0] and st[3] < 2**62 for st in stats)
    if known:
        lo, hi = min(st[0] for st in stats), max(st[1] for st in stats)
        t0, t1 = min(st[2] for st in stats), max(st[3] for st in stats)
    else:
        lo, hi = int(cid.min()), int(cid.max())
        t0, t1 = int(ts.min()), int(ts.max())
    # ids in [lo, hi] -> scan columns (-1 for ids not asked for, and for columns before the block)
    lut = np.full(hi - lo + 1, -1, dtype=np.int64)
    a, b = max(lo, first), min(hi, first + len(column) - 1)
    if b >= a:
        lut[a - lo:b - lo + 1] = column[a - first:b - first + 1]
    lut[lut < p0] = -1
    wanted = lut[lut >= 0]
    if not len(wanted):
        return None
    c0, c1 = int(wanted.min()), int(wanted.max()) + 1
    b0 = max(0, (t0 - grid.start_us) // grid.bucket_us)
    b1 = min(grid.n, (t1 - grid.start_us) // grid.bucket_us + 1)
    rows, cols = c1 - c0, b1 - b0
    if rows <= 0 or cols <= 0:
        return None
    if rows * cols <= WINDOW_CELLS:
        every = len(wanted) == len(lut) and t0 >= grid.start_us and t1 < grid.end_us
        # cell = (column - c0) * cols + (bucket - b0), from a table of (column - c0) * cols by id
        base = np.where(lut >= 0, (lut - c0) * cols, -1)
        cell = base[cid - lo] if lo else base[cid]
        bucket = ts - (grid.start_us + b0 * grid.bucket_us)
        bucket //= grid.bucket_us
        if not every:
            keep = (cell >= 0) & (bucket >= 0) & (bucket < cols)
            cell, bucket, value = cell[keep], bucket[keep], value[keep]
        cell += bucket
        sums = np.bincount(cell, weights=value, minlength=rows * cols).reshape(rows, cols)
        counts = np.bincount(cell, minlength=rows * cols).reshape(rows, cols)
        return _Window(c0, b0, sums, counts)
    col = lut[cid - lo] if lo else lut[cid]
    bucket = (ts - grid.start_us) // grid.bucket_us
    keep = (col >= 0) & (col < p1) & (bucket >= 0) & (bucket < grid.n)
    col, bucket, value = col[keep], bucket[keep], value[keep]
    if not len(col):
        return None
    cell = (col - p0) * grid.n + bucket
    if len(cell) > 1 and not bool((cell[1:] >= cell[:-1]).all()):
        order = np.argsort(cell, kind="stable")        # a file not sorted by (counter, time)
        cell, value = cell[order], value[order]
    starts = np.flatnonzero(np.concatenate(([True], cell[1:] != cell[:-1])))
    return _Runs(cell[starts], np.add.reduceat(value, starts), np.diff(np.append(starts, len(cell))))


def _in_order(pool: ThreadPoolExecutor, fn: Callable[[Any], Any], items: list[Any], ahead: int) -> Iterator[Any]:
    """fn over items on the pool, results in order, at most `ahead` submitted and not yet taken.

    (Executor.map submits every item at once, so finished results pile up while the caller is
    slower than the workers: a block's whole file list of windows in memory.)"""
    pending: deque[Future[Any]] = deque()
    for item in items:
        if len(pending) >= ahead:
            yield pending.popleft().result()
        pending.append(pool.submit(fn, item))
    while pending:
        yield pending.popleft().result()


class _Scan:
    """Bucket means of a set of counters, built one block of columns at a time in counter-id order.

    A row group usually holds the end of one block's counters and the start of the next's. It is
    read once: the columns beyond the current block are kept, reduced, in `carry` until their
    block comes. (A file reduced as runs keeps no carry, and its row groups are read again.)"""

    def __init__(self, wh: Warehouse, ids: list[int] | np.ndarray, grid: Grid, files: _Files | None = None) -> None:
        self.files = files or _Files.of(wh)
        self.grid = grid
        self.ids = np.unique(np.asarray(ids, dtype=np.int64))   # scan column j holds self.ids[j]
        self.first = int(self.ids[0]) if len(self.ids) else 0
        self.column = np.full(int(self.ids[-1]) - self.first + 1 if len(self.ids) else 0, -1, dtype=np.int64)
        self.column[self.ids - self.first] = np.arange(len(self.ids))
        self.done: set[tuple[str, int]] = set()
        self.carry: list[_Window] = []

    def block(self, p0: int, p1: int) -> np.ndarray:
        """Means of scan columns [p0, p1), shape (grid.n, p1 - p0) column-major; call in order."""
        grid, files = self.grid, self.files
        width = p1 - p0
        sums = np.zeros((width, grid.n))
        counts = np.zeros((width, grid.n), dtype=np.int32)
        flat_sums, flat_counts = sums.reshape(-1), counts.reshape(-1)
        kept: list[_Window] = []

        def add(part: _Window | _Runs | None) -> None:
            if part is None:
                return
            if isinstance(part, _Window):
                a, b = max(part.c0, p0), min(part.c1, p1)
                if b > a:
                    cols = part.sums.shape[1]
                    sums[a - p0:b - p0, part.b0:part.b0 + cols] += part.sums[a - part.c0:b - part.c0]
                    counts[a - p0:b - p0, part.b0:part.b0 + cols] += part.counts[a - part.c0:b - part.c0]
                if part.c1 > p1:    # columns of later blocks: keep them (counts as int32)
                    start = max(p1, part.c0) - part.c0
                    kept.append(_Window(part.c0 + start, part.b0, part.sums[start:].copy(),
                                        part.counts[start:].astype(np.int32)))
                return
            cell, s, c = part.cells, part.sums, part.counts
            # Regular samples give long runs of consecutive cells (one per counter in the file):
            # add each run as a slice, a plain vector add; otherwise scatter (cells are distinct).
            breaks = np.flatnonzero(np.diff(cell) != 1) + 1
            if len(breaks) * 64 < len(cell):
                bounds = np.concatenate(([0], breaks, [len(cell)])).tolist()
                first_cells = cell[bounds[:-1]].tolist()
                for k0, i, j in zip(first_cells, bounds[:-1], bounds[1:]):
                    flat_sums[k0:k0 + j - i] += s[i:j]
                    flat_counts[k0:k0 + j - i] += c[i:j]
            else:
                flat_sums[cell] += s
                flat_counts[cell] += c

        for part in self.carry:
            add(part)
        self.carry = []
        work = []
        for rel, groups in files.wanted(_Selection(self.ids[p0:p1]), grid):
            fresh = [g for g in groups if (rel, g) not in self.done]
            if fresh:
                work.append((rel, fresh))
        jobs = [(files.home / rel, files.meta.get(rel), groups, [files.stats(rel)[g] for g in groups])
                for rel, groups in work]

        def reduce(job: tuple[Path, pq.FileMetaData | None, list[int], list[tuple[int, int, int, int]]]
                   ) -> _Window | _Runs | None:
            path, meta, groups, stats = job
            return _reduce_file(path, meta, groups, self.column, self.first, grid, p0, p1, stats)

        threads = READ_THREADS if len(jobs) > 1 else 1
        with ThreadPoolExecutor(threads) as pool:
            parts = _in_order(pool, reduce, jobs, 2 * threads) if threads > 1 else map(reduce, jobs)
            for (rel, groups), part in zip(work, parts):
                add(part)
                if not isinstance(part, _Runs):   # runs keep no carry: their row groups are read again
                    self.done.update((rel, g) for g in groups)
        self.carry = kept
        empty = counts == 0
        np.divide(sums, counts, out=sums, where=~empty)
        sums[empty] = np.nan
        # Column-major (each counter's buckets contiguous): no transposing copy, and the layout
        # the correlation and rank code read fastest.
        return sums.T


def bucket_block(wh: Warehouse, ids: list[int], grid: Grid, files: _Files | None = None) -> np.ndarray:
    """Bucket means, shape (grid.n, len(ids)) in column-major order, NaN where a counter has no
    sample in a bucket.

    The grid's whole buckets are read, so a bucket holds every sample inside it even where the
    requested range began or ended inside the bucket. The three raw columns of the row groups that
    can hold these counters are read file by file (a few files at once on a thread pool) and
    reduced to per-bucket sums and counts in NumPy; no grouping query runs."""
    if not ids:
        return np.empty((grid.n, 0))
    scan = _Scan(wh, ids, grid, files)
    means = scan.block(0, len(scan.ids))
    asked = np.asarray(ids, dtype=np.int64)
    if len(asked) == len(scan.ids) and bool((asked == scan.ids).all()):
        return means
    return np.asfortranarray(means[:, np.searchsorted(scan.ids, asked)])   # columns in the order asked


def blocks(wh: Warehouse, ids: list[int], grid: Grid,
           size: int | None = None) -> Iterator[tuple[list[int], np.ndarray]]:
    """Aligned bucket means of `ids`, a block of counters at a time, in increasing counter id.

    Blocks hold `size` counters, or by default as many as BLOCK_BYTES of means allow. While the
    caller works on one block the next is read on a thread of its own (the reading waits on
    Parquet decoding and NumPy, which release the GIL), so reading and computing overlap."""
    scan = _Scan(wh, ids, grid) if len(ids) else None
    if scan is None:
        return
    width = block_width(grid, size)
    spans = [(p, min(p + width, len(scan.ids))) for p in range(0, len(scan.ids), width)]
    with ThreadPoolExecutor(1) as reader:
        ahead = reader.submit(scan.block, *spans[0])
        for k, (p0, p1) in enumerate(spans):
            block = ahead.result()
            if k + 1 < len(spans):
                ahead = reader.submit(scan.block, *spans[k + 1])
            yield scan.ids[p0:p1].tolist(), block


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
