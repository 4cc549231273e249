"""Load files into a warehouse: detect, stream, resolve counters, write, commit last."""
from __future__ import annotations

import fnmatch
import hashlib
import os
import secrets
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import duckdb
import numpy as np

from warehouse.errors import BadInputError, WarehouseError
from warehouse.home import CATALOG, check_zone, writer
from warehouse.ingest.detect import detect
from warehouse.ingest.keys import make_key, resolve_counters, source_id
from warehouse.ingest.model import Batch, CounterName, WideBatch
from warehouse.ingest.rates import RateState, is_cumulative, rates_for_batch
from warehouse.ingest.read import FileReader
from warehouse.ingest.write import PartitionWriter, file_sha256


@dataclass(frozen=True)
class IngestOptions:
    source: str = "default"
    layout: str | None = None
    delimiter: str | None = None
    decimal: str | None = None
    time_format: str | None = None
    tz: str | None = None
    host: str = ""
    cumulative: tuple[str, ...] = ()
    replace: bool = False


@dataclass
class FileResult:
    """What happened to one input file; `status` is loaded, skipped or failed."""

    path: str
    status: str
    message: str = ""
    ingest_id: str | None = None
    layout: str | None = None
    rows_read: int = 0
    rows_loaded: int = 0
    rows_quarantined: int = 0
    cells_quarantined: int = 0
    values_loaded: int = 0
    counters: int = 0
    duplicates: int = 0
    wraps: int = 0
    resets: int = 0
    warnings: list[str] = field(default_factory=list)


def sha256_of(path: Path) -> tuple[str, int]:
    digest = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        while chunk := fh.read(8 << 20):
            digest.update(chunk)
            size += len(chunk)
    return digest.hexdigest(), size


def new_ingest_id() -> str:
    return datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%S") + "-" + secrets.token_hex(4)


def ingest_files(home: Path, paths: Sequence[str | os.PathLike[str]], options: IngestOptions,
                 progress: Callable[[str, int], None] | None = None) -> list[FileResult]:
    """Load each file in turn; a bad file is reported and the others still load."""
    if not (home / CATALOG).exists():
        raise WarehouseError(f"no warehouse at {home}: run `warehouse --home {home} init` first")
    if options.tz:
        check_zone(options.tz)
    with writer(home):
        pass  # applies pending migrations once; the per-file connections below skip the check
    results = []
    for path in paths:
        try:
            results.append(_ingest_one(home, Path(path), options))
        except BadInputError as exc:
            results.append(FileResult(str(path), "failed", str(exc)))
        except OSError as exc:
            results.append(FileResult(str(path), "failed", f"{path}: cannot read: {exc.strerror or exc}"))
        if progress:
            progress(str(path), _size(Path(path)))
    return results


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def _ident(name: CounterName) -> tuple[str, str, str, str]:
    return (name.host, name.object, name.instance, name.counter)


class _Loader:
    """State of one file's load: the counter-id cache and the rate states of cumulative counters."""

    def __init__(self, home: Path, options: IngestOptions, src: int) -> None:
        self.home = home
        self.options = options
        self.src = src
        self.ids: dict[tuple[str, str, str, str], int] = {}
        self.cumulative_ids: set[int] = set()
        self.seen: set[int] = set()
        self.states: dict[int, RateState] = {}
        self.wraps = 0
        self.resets = 0

    def _kind(self, name: CounterName) -> str:
        key = make_key(name).lower()
        if any(fnmatch.fnmatchcase(key, g.lower()) for g in self.options.cumulative):
            return "rate"
        return "rate" if is_cumulative(name.counter) else "gauge"

    def preload(self, con: duckdb.DuckDBPyConnection) -> None:
        """Known counters of this source, so a file of known counters needs no registration."""
        for *ident, cid, kind in con.execute(
                "SELECT host, object, instance, counter, counter_id, kind FROM counter_defs WHERE source_id = ?",
                [self.src]).fetchall():
            self.ids[tuple(ident)] = cid
            if kind == "rate":
                self.cumulative_ids.add(cid)

    def ids_for(self, names: list[CounterName], con: duckdb.DuckDBPyConnection | None = None) -> np.ndarray:
        """Catalog ids of `names`; new ones are registered on `con`, else in a short transaction of their own."""
        new = [n for n in dict.fromkeys(names) if _ident(n) not in self.ids]
        if new:
            kinds = [self._kind(n) for n in new]
            registered = [CounterName(n.host, n.object, n.instance, n.counter,
                                      (n.unit + "/s" if n.unit else "/s") if k == "rate" else n.unit)
                          for n, k in zip(new, kinds)]
            if con is not None:
                got = resolve_counters(con, self.src, registered, kinds)
            else:
                with writer(self.home, migrated=True) as own:
                    own.execute("BEGIN TRANSACTION")
                    got = resolve_counters(own, self.src, registered, kinds)
                    own.execute("COMMIT")
            for n, k, cid in zip(new, kinds, got):
                self.ids[_ident(n)] = int(cid)
                if k == "rate":
                    self.cumulative_ids.add(int(cid))
        ids = np.array([self.ids[_ident(n)] for n in names], dtype=np.int32)
        self.seen.update(ids.tolist())
        return ids

    @property
    def used(self) -> int:
        """How many distinct counters this file named."""
        return len(self.seen)

    def long_arrays(self, batch: Batch | WideBatch) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if isinstance(batch, WideBatch):
            cid, ts, value = self._flatten(batch)
        else:
            ids = self.ids_for(batch.names)
            cid, ts, value = ids[batch.idx] if len(ids) else batch.idx, batch.ts, batch.value
        if self.cumulative_ids and len(cid):
            mask = np.zeros(int(cid.max()) + 1, dtype=bool)
            mask[[c for c in self.cumulative_ids if c < len(mask)]] = True
            if mask[cid].any():
                cid, ts, value, wraps, resets = rates_for_batch(cid, ts, value, mask, self.states)
                self.wraps += wraps
                self.resets += resets
        return cid, ts, value

    def _flatten(self, batch: WideBatch) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Column-major flattening in counter-id order: already sorted by (counter_id, ts)."""
        ids = self.ids_for(batch.names)
        rows = len(batch.ts)
        if rows == 0 or not batch.columns:
            return np.zeros(0, np.int32), np.zeros(0, np.int64), np.zeros(0)
        row_order = None if np.all(batch.ts[1:] >= batch.ts[:-1]) else np.argsort(batch.ts, kind="stable")
        ts = batch.ts if row_order is None else batch.ts[row_order]
        col_order = np.argsort(ids, kind="stable")
        if batch.block is not None:
            # Columns already in id order (the usual case) need no copy at all.
            block = batch.block if np.array_equal(col_order, np.arange(len(ids))) else batch.block[col_order]
            value = (block if row_order is None else block[:, row_order]).reshape(-1)
        else:
            value = np.empty(rows * len(ids), dtype=np.float64)
            for k, j in enumerate(col_order):
                col = batch.columns[j]
                value[k * rows:(k + 1) * rows] = col if row_order is None else col[row_order]
        missing = np.isnan(value)
        if not missing.any():
            return np.repeat(ids[col_order], rows), np.tile(ts, len(ids)), value
        # Build the kept ids and times directly instead of filtering full-length copies.
        present = ~missing
        per_counter = rows - np.count_nonzero(missing.reshape(len(ids), rows), axis=1)
        cid = np.repeat(ids[col_order], per_counter)
        tsa = np.broadcast_to(ts, (len(ids), rows))[present.reshape(len(ids), rows)]
        return cid, tsa, value[present]


def _ingest_one(home: Path, path: Path, options: IngestOptions) -> FileResult:
    if not path.is_file():
        raise BadInputError("cannot read: no such file" if not path.exists() else "cannot read: not a file",
                            path=str(path))
    digest, size = sha256_of(path)
    layout = detect(path, layout=options.layout, delimiter=options.delimiter,
                    decimal=options.decimal, time_format=options.time_format)
    reader = FileReader(path, layout, zone=options.tz or "UTC", host=options.host)
    # One short transaction before reading: skip known content, find the source, and register
    # a wide file's counters (its header names them all).
    with writer(home, migrated=True) as con:
        done = con.execute("SELECT ingest_id, path FROM ingests WHERE sha256 = ?", [digest]).fetchone()
        zone = con.execute("SELECT value FROM settings WHERE name = 'zone'").fetchone()[0]
        if done and not options.replace:
            return FileResult(str(path), "skipped", f"{path}: same content already loaded by ingest {done[0]}"
                              " (from " + done[1] + "); use --replace to load it again", ingest_id=done[0])
        con.execute("BEGIN TRANSACTION")
        src = source_id(con, options.source)
        slug = con.execute("SELECT slug FROM sources WHERE source_id = ?", [src]).fetchone()[0]
        loader = _Loader(home, options, src)
        loader.preload(con)
        if layout.kind in ("wide", "counter-paths"):
            loader.ids_for(reader.wide_names(), con)
        con.execute("COMMIT")
    reader.zone = options.tz or zone
    ingest_id = new_ingest_id()
    started = datetime.now(timezone.utc)
    out = PartitionWriter(home, ingest_id, slug)
    try:
        for batch in reader.batches():
            out.add(*loader.long_arrays(batch))
        rejects = reader.rejects()
        qfile = out.write_quarantine(str(path), rejects)
        counts = reader.counts
        result = FileResult(
            str(path), "loaded", ingest_id=ingest_id, layout=layout.kind,
            rows_read=counts.rows_read, rows_loaded=counts.rows_loaded,
            rows_quarantined=counts.rows_quarantined, cells_quarantined=counts.cells_quarantined,
            values_loaded=out.values, counters=loader.used,
            wraps=loader.wraps, resets=loader.resets, warnings=reader.warnings,
            duplicates=sum(r.reason.startswith("duplicate") for r in rejects),
        )
        _commit(home, out, result, digest, size, src, started, qfile, options.replace)
    finally:
        out.discard()
    return result


def _us_to_dt(us: int | None) -> datetime | None:
    return None if us is None else datetime.fromtimestamp(us / 1e6, tz=timezone.utc)


def _commit(home: Path, out: PartitionWriter, result: FileResult, digest: str, size: int, src: int,
            started: datetime, qfile: str | None, replace: bool) -> None:
    """Record the ingest and its files and move them into place in one short transaction."""
    extra = [qfile] if qfile else []
    old_files: list[str] = []
    with writer(home, migrated=True) as con:
        con.execute("BEGIN TRANSACTION")
        try:
            old = [r[0] for r in con.execute("SELECT ingest_id FROM ingests WHERE sha256 = ?", [digest]).fetchall()]
            if old and not replace:
                con.execute("ROLLBACK")
                result.status, result.message = "skipped", f"{result.path}: loaded meanwhile by ingest {old[0]}"
                return
            for oid in old:
                old_files += [r[0] for r in con.execute(
                    "SELECT relpath FROM ingest_files WHERE ingest_id = ?", [oid]).fetchall()]
                old_files += [r[0] for r in con.execute(
                    "SELECT quarantine_file FROM ingests WHERE ingest_id = ? AND quarantine_file IS NOT NULL",
                    [oid]).fetchall()]
                con.execute("DELETE FROM ingest_files WHERE ingest_id = ?", [oid])
                con.execute("DELETE FROM ingests WHERE ingest_id = ?", [oid])
            con.execute(
                "INSERT INTO ingests VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, now(), 'loaded', ?, ?)",
                [result.ingest_id, src, str(Path(result.path).resolve()), digest, size, result.layout,
                 result.rows_read, result.rows_loaded, result.rows_quarantined, result.cells_quarantined,
                 result.values_loaded, result.duplicates, _us_to_dt(out.first_ts), _us_to_dt(out.last_ts), started, qfile,
                 file_sha256(out.staging / qfile) if qfile else None])
            if out.files:
                con.executemany("INSERT INTO ingest_files VALUES (?, ?, ?, ?, ?, ?)",
                                [[result.ingest_id, f.relpath, f.day, f.rows, f.bytes, f.sha256] for f in out.files])
            out.publish(extra)
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise
    for rel in old_files:
        (home / rel).unlink(missing_ok=True)
