"""Shapes that pass between the ingest stages (detect -> read -> keys -> write)."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class CounterName:
    """The identity a file gives one counter, before the catalog gives it an id."""

    host: str
    object: str
    instance: str
    counter: str
    unit: str = ""


@dataclass(frozen=True)
class Layout:
    """How one CSV file is laid out, as detected (or forced by options).

    kinds: ``wide`` (time column + one column per counter, plain names), ``counter-paths``
    (wide, headers are ``\\\\host\\object(instance)\\counter`` paths, first header cell is a
    logger note), ``long`` (one sample per row: time, metric, value, optional host/tag columns)
    and ``activity`` (``#``-prefixed header, host/interval/time columns, one row per instance,
    one column per measure).
    """

    kind: str
    encoding: str
    delimiter: str
    decimal: str
    header_line: int            # 1-based line number of the header line
    columns: tuple[str, ...]    # header cells, cleaned (no leading '#', stripped)
    time_col: int
    time_format: str            # a name understood by timeparse.parse_times
    value_cols: tuple[int, ...]  # counter columns (wide kinds, activity) or the value column (long)
    metric_col: int | None = None
    host_col: int | None = None
    instance_col: int | None = None
    tag_cols: tuple[int, ...] = ()
    object_col: int | None = None   # long only: optional object column
    unit_col: int | None = None     # long only: optional unit column
    ignore_cols: tuple[int, ...] = ()
    zone_note: str | None = None
    quote_char: str = '"'


@dataclass(frozen=True)
class Reject:
    """One cell or row that could not be loaded, kept in quarantine."""

    line: int
    column: str
    raw: str
    reason: str


@dataclass
class Batch:
    """A slice of a file as long samples: names[idx[i]] had value[i] at ts[i] (UTC microseconds)."""

    names: list[CounterName]
    idx: np.ndarray      # int32, index into names
    ts: np.ndarray       # int64 microseconds since the epoch, UTC
    value: np.ndarray    # float64, finite
    rows_read: int = 0
    rows_loaded: int = 0
    rows_quarantined: int = 0
    rejects: list[Reject] = field(default_factory=list)


@dataclass
class WideBatch:
    """A slice of a wide file: columns[j][r] is names[j] at ts[r]; NaN is a missing sample."""

    names: list[CounterName]
    ts: np.ndarray              # int64 microseconds since the epoch, UTC, one per row
    columns: list[np.ndarray]   # float64, one per counter, len(ts) each
    block: np.ndarray | None = None  # the same values as one (counters, rows) array, when read in one piece
    rows_read: int = 0
    rows_loaded: int = 0
    rows_quarantined: int = 0
    rejects: list[Reject] = field(default_factory=list)
