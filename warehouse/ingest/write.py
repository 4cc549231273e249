"""Write sorted, day-partitioned Parquet into a staging folder, then move it into place.

Each file holds one day (UTC) of one batch, sorted by (counter_id, ts), so row-group statistics
let queries skip other counters. Memory is bounded by a few batches, whatever the file's size.
Batches are written on one background thread while the caller reads the next one.
"""
from __future__ import annotations

import hashlib
import os
import shutil
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from warehouse.ingest.model import Reject

US_PER_DAY = 86_400_000_000
# Rows per row group. Files are sorted by (counter, time), so a row group holds a few counters'
# runs and its statistics let a reader that wants one counter skip the others; 32 Ki rows (about
# 0.6 MB before compression) keep that skipping fine-grained at a small cost in metadata.
ROW_GROUP = 32 * 1024
# Only counter_id is dictionary-encoded (long runs of one id). Times are delta-encoded: a counter's
# run of regular samples becomes a run of equal deltas, packed to almost nothing. The pages are then
# LZ4-compressed. Measured on the demo's 3.5 M values against plain + zstd: 14.7 vs 27.5 MB, written
# in half the time, read 2.2x faster (and DuckDB reads every one of these encodings).
DICTIONARY_COLUMNS = ["counter_id"]
COLUMN_ENCODING = {"ts": "DELTA_BINARY_PACKED"}
COMPRESSION = "lz4"
IN_FLIGHT = 1   # batches queued or being written; add() waits beyond that, which bounds memory
POINTS_SCHEMA = pa.schema([
    ("ts", pa.timestamp("us", tz="UTC")),
    ("counter_id", pa.int32()),
    ("value", pa.float64()),
])
QUARANTINE_SCHEMA = pa.schema([
    ("ingest_id", pa.string()), ("file", pa.string()), ("line", pa.int64()),
    ("column_name", pa.string()), ("raw", pa.string()), ("reason", pa.string()),
])


@dataclass(frozen=True)
class WrittenFile:
    relpath: str       # relative to the home, where it will live once published
    day: str           # YYYY-MM-DD (UTC)
    rows: int
    bytes: int
    sha256: str = ""   # of the file as written, for `warehouse check --deep`


def file_sha256(path: Path) -> str:
    """Checksum of a file just written (still in the page cache, so this costs little)."""
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def is_sorted(cid: np.ndarray, ts: np.ndarray) -> bool:
    """True when (cid, ts) pairs are already in non-decreasing order."""
    if len(cid) < 2:
        return True
    before, after = cid[:-1], cid[1:]
    if not np.all(after >= before):
        return False
    # Time may step back only where the counter changes; those places are few, so check them alone.
    back = np.flatnonzero(ts[1:] < ts[:-1])
    return bool(np.all(after[back] != before[back]))


class PartitionWriter:
    """Collects batches of (counter_id, ts, value) and writes them as staged Parquet files.

    add() hands each batch to a single writer thread, so files keep their order; `files`,
    `values`, `first_ts` and `last_ts` wait for the queued batches, and re-raise a failed write.
    The arrays passed to add() must not be changed afterwards.
    """

    def __init__(self, home: Path, ingest_id: str, source_slug: str) -> None:
        self.home = home
        self.ingest_id = ingest_id
        self.source_slug = source_slug
        self.staging = home / "staging" / ingest_id
        self.staging.mkdir(parents=True, exist_ok=True)
        (self.staging / "pid").write_text(str(os.getpid()))
        self._files: list[WrittenFile] = []
        self._values = 0
        self._first_ts: int | None = None
        self._last_ts: int | None = None
        self._pool: ThreadPoolExecutor | None = None
        self._pending: deque[Future[None]] = deque()

    @property
    def files(self) -> list[WrittenFile]:
        self.flush()
        return self._files

    @property
    def values(self) -> int:
        self.flush()
        return self._values

    @property
    def first_ts(self) -> int | None:
        self.flush()
        return self._first_ts

    @property
    def last_ts(self) -> int | None:
        self.flush()
        return self._last_ts

    def add(self, cid: np.ndarray, ts: np.ndarray, value: np.ndarray) -> None:
        if len(cid) == 0:
            return
        while len(self._pending) >= IN_FLIGHT:
            self._pending.popleft().result()
        if self._pool is None:
            self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="parquet-writer")
        self._pending.append(self._pool.submit(self._add, cid, ts, value))

    def flush(self) -> None:
        """Wait until every batch given to add() is written."""
        while self._pending:
            self._pending.popleft().result()

    def _add(self, cid: np.ndarray, ts: np.ndarray, value: np.ndarray) -> None:
        if not is_sorted(cid, ts):
            order = np.lexsort((ts, cid))
            cid, ts, value = cid[order], ts[order], value[order]
        self._values += len(cid)
        lo, hi = int(ts.min()), int(ts.max())
        self._first_ts = lo if self._first_ts is None else min(self._first_ts, lo)
        self._last_ts = hi if self._last_ts is None else max(self._last_ts, hi)
        first_day, last_day = lo // US_PER_DAY, hi // US_PER_DAY
        if first_day == last_day:
            self._write(first_day, cid, ts, value)
            return
        day = ts // US_PER_DAY
        # A batch usually spans a day or two: test those days rather than sorting out unique days.
        days = range(first_day, last_day + 1) if last_day - first_day < 32 else np.unique(day)
        for d in days:
            mask = day == d
            if mask.any():
                self._write(int(d), cid[mask], ts[mask], value[mask])

    def _write(self, day: int, cid: np.ndarray, ts: np.ndarray, value: np.ndarray) -> None:
        date = str(np.datetime64(day, "D"))
        rel = Path("points") / f"source={self.source_slug}" / f"date={date}" / f"{self.ingest_id}-{len(self._files):05d}.parquet"
        target = self.staging / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        table = pa.table([
            pa.array(ts, pa.int64()).cast(pa.timestamp("us", tz="UTC")),
            pa.array(cid, pa.int32()),
            pa.array(value, pa.float64()),
        ], schema=POINTS_SCHEMA)
        pq.write_table(table, target, compression=COMPRESSION, row_group_size=ROW_GROUP,
                       use_dictionary=DICTIONARY_COLUMNS, column_encoding=COLUMN_ENCODING)
        self._files.append(WrittenFile(rel.as_posix(), date, len(cid), target.stat().st_size, file_sha256(target)))

    def write_quarantine(self, path: str, rejects: list[Reject]) -> str | None:
        """Stage the quarantine rows of this ingest; returns their future relative path."""
        if not rejects:
            return None
        rel = Path("quarantine") / f"{self.ingest_id}.parquet"
        target = self.staging / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        table = pa.table({
            "ingest_id": [self.ingest_id] * len(rejects),
            "file": [path] * len(rejects),
            "line": [r.line for r in rejects],
            "column_name": [r.column for r in rejects],
            "raw": [r.raw for r in rejects],
            "reason": [r.reason for r in rejects],
        }, schema=QUARANTINE_SCHEMA)
        pq.write_table(table, target, compression="zstd")
        return rel.as_posix()

    def publish(self, extra: list[str]) -> None:
        """Move staged files into place (same file system: each move is atomic)."""
        for rel in [f.relpath for f in self.files] + extra:
            dest = self.home / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            os.replace(self.staging / rel, dest)

    def discard(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)   # nothing may write after the removal
            self._pool = None
        self._pending.clear()
        shutil.rmtree(self.staging, ignore_errors=True)
