"""Stream a detected CSV file as batches of samples, never holding the whole file in memory.

Wide kinds and long files go through pyarrow's streaming CSV reader with every column read as
text, then cast per column: a fast vectorised cast for clean columns, a per-cell check only for a
column whose cast failed, so one bad cell costs one quarantine row, not the batch.
Activity exports (several '#' header sections per file) are read line by line.
"""
from __future__ import annotations

import codecs
import csv
import io
import os
import re
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from warehouse.errors import BadInputError
from warehouse.ingest.model import Batch, CounterName, Layout, Reject, WideBatch
from warehouse.ingest.names import counter_from_header, parse_counter_path, split_unit
from warehouse.ingest.timeparse import REASONS, parse_times

# pyarrow's streaming CSV reader reads up to 32 blocks ahead of the parser, so the block size
# sets the memory: 8 MiB keeps that under 256 MiB and a batch of a wide file near 1.5 M values.
BLOCK_SIZE = 8 << 20
NULLS = ["", " ", "  "]
ACTIVITY_ROWS = 100_000
_NUMBER = r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$"
_CODE_UNPARSABLE = 1


@dataclass
class RejectLog:
    """Rejects with provisional positions, turned into file line numbers once the file is read.

    The streaming parser does not report line numbers, so a reject records the index of its
    row among the rows the parser accepted; parser-level (ragged) rows record their text.
    """

    cells: list[tuple[int, str, str, str]] = field(default_factory=list)    # (row index, column, raw, reason)
    ragged: list[tuple[str, str]] = field(default_factory=list)             # (text, reason)
    lines: list[tuple[int, str, str, str]] = field(default_factory=list)    # already numbered

    def __len__(self) -> int:
        return len(self.cells) + len(self.ragged) + len(self.lines)

    def finish(self, path: str, layout: Layout) -> list[Reject]:
        out = [Reject(*r) for r in self.lines]
        if self.cells or self.ragged:
            out.extend(self._number(path, layout))
        out.sort(key=lambda r: (r.line, r.column))
        return out

    def _number(self, path: str, layout: Layout) -> list[Reject]:
        want_ragged = [t.rstrip("\r") for t, _ in self.ragged]
        row_lines: list[int] = []
        ragged_lines: list[int] = []
        needed_rows = max((c[0] for c in self.cells), default=-1)
        with open(path, encoding=layout.encoding, errors="replace", newline="") as fh:
            for no, text in enumerate(fh, start=1):
                if no <= layout.header_line:
                    continue
                text = text.rstrip("\r\n")
                if not text:
                    continue   # only a truly empty line is no row: "\t\t" or " " is one (usually ragged)
                if len(ragged_lines) < len(want_ragged) and text == want_ragged[len(ragged_lines)]:
                    ragged_lines.append(no)
                    continue
                row_lines.append(no)
                if len(row_lines) > needed_rows and len(ragged_lines) == len(want_ragged):
                    break
        out = []
        for (row, column, raw, reason) in self.cells:
            line = row_lines[row] if row < len(row_lines) else layout.header_line + 1 + row
            out.append(Reject(line, column, raw, reason))
        for i, (text, reason) in enumerate(self.ragged):
            line = ragged_lines[i] if i < len(ragged_lines) else 0
            out.append(Reject(line, "", text[:2000], reason))
        return out


@dataclass
class Counts:
    rows_read: int = 0
    rows_loaded: int = 0
    rows_quarantined: int = 0
    cells_quarantined: int = 0


def to_float(col: pa.Array, decimal: str) -> tuple[np.ndarray, np.ndarray]:
    """Text cells to float64 (NaN where missing) and a mask of cells that are present but bad."""
    if decimal != ".":
        col = pc.replace_substring(col, decimal, ".")
    try:
        values = pc.cast(col, pa.float64())
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        trimmed = pc.utf8_trim_whitespace(col)
        good = pc.match_substring_regex(trimmed, _NUMBER)
        values = pc.cast(pc.if_else(good, trimmed, pa.scalar(None, pa.string())), pa.float64())
    out = values.to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
    present = ~np.asarray(pc.is_null(col).to_numpy(zero_copy_only=False), dtype=bool)
    bad = present & ~np.isfinite(out)
    if bad.any():
        out = out.copy()
        out[bad] = np.nan
    return out, bad


def block_to_float(cols: list[pa.Array], decimal: str) -> np.ndarray | None:
    """All value columns of a batch cast in one call, as a (columns, rows) float64 array.

    None when any present cell is not a finite number: the caller then takes the per-column
    path, which finds and quarantines those cells. One cast over all columns costs far less
    than thousands of small casts of a wide file's columns.
    """
    if not cols or len(cols[0]) == 0:
        return None
    # As chunks of one array the columns are cast in one call without being copied together
    # first; the cast writes one contiguous result, which numpy then sees without a copy.
    text = pa.chunked_array(cols, type=pa.string())
    try:
        if decimal != ".":
            text = pc.replace_substring(text, decimal, ".")
        values = pc.cast(text, pa.float64())
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    out = pc.fill_null(values, np.nan).to_numpy()       # missing cells become NaN
    if out.size - np.count_nonzero(np.isfinite(out)) != text.null_count:
        return None
    return out.reshape(len(cols), -1)


def _sorted_union(seen: np.ndarray, new: np.ndarray) -> np.ndarray:
    """np.union1d for a sorted unique `seen` and a (mostly sorted) `new`, without hashing.

    A stable sort of two sorted runs is a linear merge; hashing timestamps, which share their
    low bits, is slow, and it was redone over the whole history for every batch.
    """
    merged = np.concatenate((seen, new))
    merged.sort(kind="stable")
    if len(merged) < 2:
        return merged
    first = np.empty(len(merged), dtype=bool)
    first[0] = True
    np.not_equal(merged[1:], merged[:-1], out=first[1:])
    return merged if first.all() else merged[first]


def _in_sorted(values: np.ndarray, sorted_unique: np.ndarray) -> np.ndarray:
    """np.isin(values, sorted_unique) by binary search."""
    if len(sorted_unique) == 0:
        return np.zeros(len(values), dtype=bool)
    pos = np.minimum(np.searchsorted(sorted_unique, values), len(sorted_unique) - 1)
    return sorted_unique[pos] == values


def _strings(arr: pa.Array | pa.ChunkedArray) -> pa.Array:
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    return arr


def _reason_for_bad_cell(raw: str) -> str:
    text = raw.strip().lower()
    if text in {"nan", "inf", "+inf", "-inf", "infinity", "-infinity"}:
        return "not a finite number"
    return "not a number"


class FileReader:
    """Reads one file laid out as `layout`; iterate `batches()`, then read `counts` and `rejects`."""

    def __init__(self, path: str | os.PathLike[str], layout: Layout, *, zone: str,
                 host: str = "", block_size: int = BLOCK_SIZE) -> None:
        self.path = str(path)
        self.layout = layout
        self.zone = zone
        self.host = host
        self.block_size = block_size
        self.counts = Counts()
        self.log = RejectLog()
        self.warnings: list[str] = []
        self._row_base = 0
        self._names: list[CounterName] | None = None

    def rejects(self) -> list[Reject]:
        return self.log.finish(self.path, self.layout)

    def batches(self) -> Iterator[Batch | WideBatch]:
        if self.layout.kind == "activity":
            yield from self._activity()
        elif self.layout.kind == "long":
            yield from self._long()
        else:
            yield from self._wide()

    # -- shared pieces -----------------------------------------------------------------------
    def _open(self) -> pacsv.CSVStreamingReader:
        lay = self.layout
        names = [f"c{i}" for i in range(len(lay.columns))]
        encoding = "utf8" if lay.encoding.replace("_", "-").lower() in {"utf-8", "utf-8-sig", "utf8"} else lay.encoding

        def ragged(row: pacsv.InvalidRow) -> str:
            self.log.ragged.append((row.text, f"expected {row.expected_columns} fields, found {row.actual_columns}"))
            self.counts.rows_read += 1
            self.counts.rows_quarantined += 1
            return "skip"

        try:
            return pacsv.open_csv(
                self.path,
                read_options=pacsv.ReadOptions(skip_rows=lay.header_line, column_names=names,
                                               block_size=self.block_size, encoding=encoding,
                                               # parsing ahead on more threads only competes with
                                               # the cast and the Parquet writer thread
                                               use_threads=False),
                parse_options=pacsv.ParseOptions(delimiter=lay.delimiter, quote_char=lay.quote_char or False,
                                                 invalid_row_handler=ragged),
                convert_options=pacsv.ConvertOptions(column_types={n: pa.string() for n in names},
                                                     strings_can_be_null=True, null_values=NULLS,
                                                     quoted_strings_can_be_null=True),
            )
        except pa.ArrowInvalid as exc:
            if "Empty CSV file" in str(exc):
                return None  # type: ignore[return-value]
            raise BadInputError(f"cannot parse as CSV: {exc}", path=self.path) from exc

    def _record_batches(self) -> Iterator[pa.RecordBatch]:
        reader = self._open()
        if reader is None:
            return
        while True:
            try:
                batch = reader.read_next_batch()
            except StopIteration:
                return
            except (pa.ArrowInvalid, UnicodeDecodeError) as exc:
                raise BadInputError(f"cannot parse as CSV after row {self._row_base}: {exc}",
                                    path=self.path) from exc
            yield batch

    def _times(self, col: pa.Array, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """UTC microseconds and a keep-mask; rows whose time fails are quarantined whole."""
        ts, reason = parse_times(col, self.layout.time_format, self.zone)
        bad = reason != 0
        if bad.any():
            raw = col.to_pylist()
            name = self.layout.columns[self.layout.time_col]
            for i in np.flatnonzero(bad):
                self.log.cells.append((int(rows[i]), name, "" if raw[i] is None else raw[i], REASONS[reason[i]]))
        return ts, ~bad

    def _cell_rejects(self, bad: np.ndarray, col: pa.Array, rows: np.ndarray, name: str) -> None:
        raw = col.take(pa.array(np.flatnonzero(bad))).to_pylist()
        for i, text in zip(np.flatnonzero(bad), raw):
            self.log.cells.append((int(rows[i]), name, text, _reason_for_bad_cell(text)))
        self.counts.cells_quarantined += int(bad.sum())

    def _unnamed_cells(self, rb: pa.RecordBatch, keep: np.ndarray, rows: np.ndarray) -> None:
        """Text in a column without a header name has no counter to go to: quarantined, never dropped."""
        for j in self.layout.ignore_cols:
            if self.layout.columns[j] or j >= rb.num_columns:
                continue
            col = _strings(rb.column(j))
            if col.null_count == len(col):
                continue
            present = ~np.asarray(pc.is_null(col).to_numpy(zero_copy_only=False), dtype=bool) & keep
            if present.any():
                raw = col.take(pa.array(np.flatnonzero(present))).to_pylist()
                for i, text in zip(np.flatnonzero(present), raw):
                    self.log.cells.append((int(rows[i]), f"column {j + 1}", text,
                                           "value in a column without a header name"))
                self.counts.cells_quarantined += int(present.sum())

    # -- wide kinds -------------------------------------------------------------------------
    def wide_names(self) -> list[CounterName]:
        """The counters a wide header names (computed once; repeated headers are warned about)."""
        if self._names is None:
            self._names = self._header_names()
        return self._names

    def _header_names(self) -> list[CounterName]:
        lay = self.layout
        names: list[CounterName] = []
        seen: dict[tuple[str, str, str, str], int] = {}
        for j in lay.value_cols:
            header = lay.columns[j]
            name = None
            if lay.kind == "counter-paths":
                name = parse_counter_path(header)
            if name is None:
                name = counter_from_header(header or f"column {j + 1}", host=self.host)
            ident = (name.host, name.object, name.instance, name.counter)
            if ident in seen:
                self.warnings.append(f"{self.path}: column {j + 1} repeats header {header!r}; loaded as a separate counter")
                name = CounterName(name.host, name.object, name.instance, f"{name.counter} [column {j + 1}]", name.unit)
            seen[ident] = j
            names.append(name)
        return names

    def _wide(self) -> Iterator[WideBatch]:
        lay = self.layout
        names = self.wide_names()
        seen_ts = np.zeros(0, dtype=np.int64)
        for rb in self._record_batches():
            n = rb.num_rows
            rows = np.arange(self._row_base, self._row_base + n)
            self._row_base += n
            self.counts.rows_read += n
            ts, keep = self._times(_strings(rb.column(lay.time_col)), rows)
            keep &= self._first_time(ts, keep, rows, seen_ts)
            seen_ts = _sorted_union(seen_ts, ts[keep])
            texts = [_strings(rb.column(j)) for j in lay.value_cols]
            block = block_to_float(texts, lay.decimal)
            columns = []
            if block is not None:
                if not keep.all():
                    block = block[:, keep]
                columns = list(block)
            else:
                for j, col in zip(lay.value_cols, texts):
                    values, bad = to_float(col, lay.decimal)
                    bad &= keep
                    if bad.any():
                        self._cell_rejects(bad, col, rows, lay.columns[j])
                    columns.append(values[keep] if not keep.all() else values)
            self._unnamed_cells(rb, keep, rows)
            kept = int(keep.sum())
            self.counts.rows_loaded += kept
            self.counts.rows_quarantined += n - kept
            yield WideBatch(names=names, ts=ts[keep], columns=columns, block=block)

    def _first_time(self, ts: np.ndarray, keep: np.ndarray, rows: np.ndarray, seen: np.ndarray) -> np.ndarray:
        """Rule for repeated timestamps in a wide file: the first row wins, later ones are quarantined."""
        first = np.ones(len(ts), dtype=bool)
        idx = np.flatnonzero(keep)
        if len(idx) == 0:
            return first
        _, pos = np.unique(ts[idx], return_index=True)
        dup = np.ones(len(idx), dtype=bool)
        dup[pos] = False
        dup |= _in_sorted(ts[idx], seen)
        name = self.layout.columns[self.layout.time_col]
        for i in idx[dup]:
            first[i] = False
            self.log.cells.append((int(rows[i]), name, "", "duplicate timestamp: an earlier row has the same time"))
        return first

    # -- long -----------------------------------------------------------------------------------
    def _long(self) -> Iterator[Batch]:
        lay = self.layout
        for rb in self._record_batches():
            n = rb.num_rows
            rows = np.arange(self._row_base, self._row_base + n)
            self._row_base += n
            self.counts.rows_read += n
            ts, keep = self._times(_strings(rb.column(lay.time_col)), rows)
            metric = _strings(rb.column(lay.metric_col))
            no_metric = np.asarray(pc.is_null(metric).to_numpy(zero_copy_only=False), dtype=bool) & keep
            for i in np.flatnonzero(no_metric):
                self.log.cells.append((int(rows[i]), lay.columns[lay.metric_col], "", "missing metric name"))
            keep &= ~no_metric
            vcol = _strings(rb.column(lay.value_cols[0]))
            values, bad = to_float(vcol, lay.decimal)
            missing = ~bad & np.isnan(values) & keep
            for i in np.flatnonzero(missing):
                self.log.cells.append((int(rows[i]), lay.columns[lay.value_cols[0]], "", "missing value"))
            bad &= keep
            if bad.any():
                raw = vcol.take(pa.array(np.flatnonzero(bad))).to_pylist()
                for i, text in zip(np.flatnonzero(bad), raw):
                    self.log.cells.append((int(rows[i]), lay.columns[lay.value_cols[0]], text, _reason_for_bad_cell(text)))
            keep &= np.isfinite(values)
            names, idx = self._long_identity(rb, keep)
            keep = self._first_sample(idx, ts, keep, rows)
            self._unnamed_cells(rb, keep, rows)
            kept = int(keep.sum())
            self.counts.rows_loaded += kept
            self.counts.rows_quarantined += n - kept
            yield Batch(names=names, idx=idx[keep].astype(np.int32), ts=ts[keep], value=values[keep])

    def _long_identity(self, rb: pa.RecordBatch, keep: np.ndarray) -> tuple[list[CounterName], np.ndarray]:
        """Dictionary-encode (host, object, instance+tags, metric, unit) per row to local indices."""
        lay = self.layout
        n = rb.num_rows

        def text(col: int | None, default: str = "") -> pa.Array:
            if col is None:
                return pa.array([default] * n, pa.string())
            return pc.fill_null(_strings(rb.column(col)), "")

        host = text(lay.host_col, self.host)
        obj = text(lay.object_col)
        inst = text(lay.instance_col)
        for t in sorted(lay.tag_cols, key=lambda c: lay.columns[c]):
            tag = pc.binary_join_element_wise(lay.columns[t], text(t), "=")
            inst = pc.if_else(pc.equal(pc.utf8_length(inst), 0), tag,
                              pc.binary_join_element_wise(inst, tag, ","))
        unit = text(lay.unit_col)
        metric = text(lay.metric_col)
        joined = pc.binary_join_element_wise(host, obj, inst, metric, unit, "\x1f")
        enc = pc.dictionary_encode(joined)
        idx = np.asarray(enc.indices.to_numpy(zero_copy_only=False), dtype=np.int64)
        names = []
        for combo in enc.dictionary.to_pylist():
            h, o, i, m, u = combo.split("\x1f")
            counter, guessed = split_unit(m)
            names.append(CounterName(h, o, i, counter, u or guessed))
        return names, idx

    def _first_sample(self, idx: np.ndarray, ts: np.ndarray, keep: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """Rule for repeated samples in a long file: the first row of a (counter, time) wins."""
        pos = np.flatnonzero(keep)
        if len(pos) < 2:
            return keep
        order = pos[np.lexsort((pos, ts[pos], idx[pos]))]
        same = (idx[order][1:] == idx[order][:-1]) & (ts[order][1:] == ts[order][:-1])
        if not same.any():
            return keep
        keep = keep.copy()
        for i in order[1:][same]:
            keep[i] = False
            self.log.cells.append((int(rows[i]), self.layout.columns[self.layout.time_col], "",
                                   "duplicate sample: an earlier row has the same counter and time"))
        return keep

    # -- activity ----------------------------------------------------------------------------------
    def _activity(self) -> Iterator[Batch]:
        section: _Section | None = None
        pending: list[tuple[int, list[str]]] = []
        for no, text in self._lines():
            if text.startswith("#"):
                if pending and section:
                    yield self._activity_batch(section, pending)
                    pending = []
                section = _Section.parse(text, self.layout.delimiter, no, self.path)
                continue
            if not text.strip():
                continue
            self.counts.rows_read += 1
            fields = (text.split(self.layout.delimiter) if '"' not in text
                      else next(csv.reader([text], delimiter=self.layout.delimiter)))
            if section is None or len(fields) != len(section.columns):
                expected = len(section.columns) if section else 0
                self.log.lines.append((no, "", text[:2000], f"expected {expected} fields, found {len(fields)}"))
                self.counts.rows_quarantined += 1
                continue
            pending.append((no, fields))
            if len(pending) >= ACTIVITY_ROWS:
                yield self._activity_batch(section, pending)
                pending = []
        if pending and section:
            yield self._activity_batch(section, pending)

    def _lines(self) -> Iterator[tuple[int, str]]:
        with open(self.path, encoding=self.layout.encoding, errors="strict", newline="") as fh:
            try:
                for no, text in enumerate(fh, start=1):
                    if no < self.layout.header_line:
                        continue
                    yield no, text.rstrip("\r\n")
            except UnicodeDecodeError as exc:
                raise BadInputError(f"cannot decode as {self.layout.encoding}: {exc.reason}", path=self.path) from exc

    def _activity_batch(self, sec: "_Section", rows: list[tuple[int, list[str]]]) -> Batch:
        lines = np.array([no for no, _ in rows], dtype=np.int64)
        cols = list(zip(*(f for _, f in rows)))
        ts, reason = parse_times(pa.array(cols[sec.time_col], pa.string()), self.layout.time_format, self.zone)
        keep = reason == 0
        for i in np.flatnonzero(~keep):
            self.log.lines.append((int(lines[i]), sec.columns[sec.time_col], cols[sec.time_col][i], REASONS[reason[i]]))
        hosts = cols[sec.host_col] if sec.host_col is not None else [self.host] * len(rows)
        insts = cols[sec.instance_col] if sec.instance_col is not None else [""] * len(rows)
        pairs: dict[tuple[str, str], int] = {}
        pair_idx = np.array([pairs.setdefault((h, i), len(pairs)) for h, i in zip(hosts, insts)], dtype=np.int64)
        obj = sec.columns[sec.instance_col].lower() if sec.instance_col is not None else ""
        names: list[CounterName] = []
        m = len(sec.measures)
        for (h, inst) in pairs:
            for j in sec.measures:
                counter, unit = split_unit(sec.columns[j])
                names.append(CounterName(h, obj, inst, counter, unit))
        out_idx, out_ts, out_val = [], [], []
        for k, j in enumerate(sec.measures):
            col = pa.array(cols[j], pa.string())
            col = pc.if_else(pc.is_in(col, pa.array(NULLS)), pa.scalar(None, pa.string()), col)
            values, bad = to_float(col, self.layout.decimal)
            bad &= keep
            for i in np.flatnonzero(bad):
                self.log.lines.append((int(lines[i]), sec.columns[j], cols[j][i], _reason_for_bad_cell(cols[j][i])))
            self.counts.cells_quarantined += int(bad.sum())
            ok = keep & np.isfinite(values)
            out_idx.append(pair_idx[ok] * m + k)
            out_ts.append(ts[ok])
            out_val.append(values[ok])
        idx = np.concatenate(out_idx) if out_idx else np.zeros(0, np.int64)
        tsa = np.concatenate(out_ts) if out_ts else np.zeros(0, np.int64)
        val = np.concatenate(out_val) if out_val else np.zeros(0)
        kept = int(keep.sum())
        self.counts.rows_loaded += kept
        self.counts.rows_quarantined += len(rows) - kept
        return Batch(names=names, idx=idx.astype(np.int32), ts=tsa, value=val)


@dataclass
class _Section:
    columns: list[str]
    time_col: int
    host_col: int | None
    instance_col: int | None
    measures: list[int]

    @classmethod
    def parse(cls, text: str, delimiter: str, line: int, path: str) -> "_Section":
        cols = [c.strip() for c in text.lstrip("#").strip().split(delimiter)]
        lower = [c.lower() for c in cols]
        time_col = next((i for i, c in enumerate(lower) if c in {"timestamp", "time", "ts", "datetime"}), None)
        if time_col is None:
            raise BadInputError(f"no timestamp column in header (columns: {', '.join(cols)})", path=path, line=line)
        host_col = next((i for i, c in enumerate(lower) if c in {"hostname", "host"}), None)
        skip = {time_col, host_col} | {i for i, c in enumerate(lower) if c == "interval"}
        rest = [i for i in range(len(cols)) if i not in skip]
        instance_col = None
        if rest and not _looks_like_measure(cols[rest[0]]):
            instance_col = rest[0]
            rest = rest[1:]
        return cls(cols, time_col, host_col, instance_col, rest)


def _looks_like_measure(header: str) -> bool:
    """Instance columns are bare upper-case words (CPU, IFACE, DEV); measures have %, /s, lower case."""
    return not re.fullmatch(r"[A-Z][A-Z0-9_-]*", header)
