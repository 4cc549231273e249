"""Deterministic demo data: the performance-counter exports of an invented claims office.

The organisation, its machines and every number below are made up.  Each machine's collector
writes its own kind of file (see docs/layouts.md), and a handful of phenomena are planted with
exact parameters so that tests can check the analysis recovers them.  SCENARIO holds those
parameters; seed/SCENARIO.md tells the story and lists them again.

    python -m seed.generate OUT_DIR [--scale small|large] [--seed N]

Same arguments -> byte-identical files.  Files are produced and written one at a time (one
week of one machine, or one day of the file server): besides the period's time grid, memory
holds one file's data at most.
"""
from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

# --------------------------------------------------------------------------------------------
# The scenario: every planted parameter is a module-level constant
# --------------------------------------------------------------------------------------------

ORGANISATION = "Quillbrook Mutual Claims"
SITE = "Tannerfield office"
TZ = "Europe/Berlin"
START_LOCAL = "2026-03-02 00:00"          # a Monday; the DST change of 2026-03-29 is inside
DEFAULT_SEED = 20260302
LOGGER_NOTE = "(LOGGER-CSV 4.0) (W. Europe Standard Time)(-60)"

HV_HOSTS = ("vdi-hv01", "vdi-hv02", "vdi-hv03")
HV_UTF16_HOST = "vdi-hv03"                # written as UTF-16 LE with BOM; the others UTF-8 + BOM
ARRAY = "san01"
FILE_SERVER = "fs01"
SWITCH = "core-sw01"

# 1. daily working rhythm (activity is 1.0 at the weekday working level; local time)
NIGHT_LEVEL = 0.05
LOGON_START_H = 7.5                        # 07:30 log-ons begin
LOGON_END_H = 9.0                          # 09:00 working level reached
SURGE_PEAK_H = 8.25                        # 08:15 peak of the log-on surge
SURGE_SIGMA_H = 0.2                        # 12 minutes
SURGE_AMPLITUDE = 0.8                      # added to the activity at the surge peak
WORK_END_H = 17.0
EVENING_END_H = 19.0
EVENING_LEVEL = 0.15
LATE_END_H = 22.0                          # back to NIGHT_LEVEL
WEEKEND_LEVEL = 0.10                       # flat all Saturday and Sunday
# 2. busiest weekday
BUSIEST_WEEKDAY = 1                        # Monday = 0 -> Tuesday
BUSIEST_FACTOR = 1.25                      # multiplies the whole weekday activity

# hypervisor hosts: how activity becomes counters
DESKTOPS_PER_HOST = 100
SESSION_OCCUPANCY = 0.92                   # share of desktops in session at the working level
CPU_FLOOR_PCT = 5.0
CPU_SPAN_PCT = 40.0                        # host CPU % = floor + span * activity + scan + noise
CPU_NOISE_SD = 1.5
HOST_MEMORY_MB = 786432                    # 7. constant: Memory\Total MBytes
HOST_RESERVED_MB = 131072
MB_PER_SESSION = 4096
LOGICAL_CPUS = 32

# 4. background scan process on one host, one weekday
SCAN_HOST = "vdi-hv02"
SCAN_PROCESS = "scanagent"
SCAN_WEEKDAY = 3                           # Thursday
SCAN_START_H = 13.0                        # 13:00 local
SCAN_DURATION_S = 2400                     # 40 minutes: [13:00, 13:40)
SCAN_HOST_CPU_PP = 30.0                    # added to Processor(_Total)\% Processor Time
SCAN_PROCESS_PCT = SCAN_HOST_CPU_PP * LOGICAL_CPUS   # 960 % of one logical processor
SCAN_IDLE_PCT = 0.4                        # median scanagent CPU outside the window

# 8. gap: one host off (no rows at all)
GAP_HOST = "vdi-hv03"
GAP_START_LOCAL = "2026-03-17 19:00"
GAP_END_LOCAL = "2026-03-18 06:30"          # exclusive: first row again at 06:30:00

# storage array pools: (read base, read span, write base, write span) in IO/s, capacity GB
POOLS: dict[str, tuple[float, float, float, float, int]] = {
    "vdi": (600.0, 7000.0, 400.0, 3000.0, 40960),
    "files": (80.0, 900.0, 40.0, 500.0, 20480),
    "archive": (20.0, 60.0, 30.0, 120.0, 81920),
}
IOPS_NOISE_SIGMA = 0.08
# 3. cache destage: write-latency peaks on every pool of the array
DESTAGE_PERIOD_S = 660                     # 11 minutes
DESTAGE_DURATION_S = 120                   # 2 minutes
DESTAGE_AMPLITUDE_MS = 4.0                 # added to write_latency_ms
DESTAGE_FIRST_UTC = "2026-03-01T23:03:00Z"  # start + 3 min; then every DESTAGE_PERIOD_S
# The office's own storage service levels (invented like everything here), written by `warehouse
# demo` as the home's limits.toml: the destage pulses cross warn and critical, the base never does.
SERVICE_LEVELS_TOML = """\
# Quillbrook Mutual Claims, Tannerfield office: the storage service levels the desktop team agreed
# with the array's owners (invented for the demo). `warehouse limits` reads this file first; the
# shipped common-practice set follows it.
[[limit]]
counters = "san01/*/write_latency_ms"
unit = "ms"
warn = 3
critical = 4.5
direction = "above"
"""
WRITE_LAT_BASE_MS = 0.6
WRITE_LAT_PER_QUEUE_MS = 0.05
WRITE_LAT_SIGMA = 0.2
# 5. queue depth leads read latency
LEAD_POOL = "vdi"
LEAD_SAMPLES = 2                           # read_latency_ms[k] depends on queue_depth[k - 2]
QUEUE_BASE = 1.0
QUEUE_PER_IOPS = 1.0 / 2000.0
QUEUE_AR_PHI = 0.3                         # innovation filter 0.3**j, j = 0..29
QUEUE_AR_SD = 0.6
QUEUE_AR_TAPS = 30
READ_LAT_BASE_MS = 0.4
READ_LAT_PER_QUEUE_MS = 0.25
READ_LAT_SIGMA = 0.08                      # median-1 lognormal factor
# 6. level shift: rollout raises IOPS on one pool
SHIFT_POOL = "vdi"
SHIFT_METRICS = ("read_iops", "write_iops")
SHIFT_AT_LOCAL = "2026-03-16 06:00"
SHIFT_FACTOR = 1.30                        # +30 %
SAN_METRICS = ("read_iops", "write_iops", "read_latency_ms", "write_latency_ms",
               "queue_depth", "capacity_total_gb")
SAN_DECIMALS = {"read_iops": 1, "write_iops": 1, "read_latency_ms": 3, "write_latency_ms": 3,
                "queue_depth": 2, "capacity_total_gb": 0}

# core switch: cumulative 32-bit octet counters
COUNTER_MODULUS = 2 ** 32
WRAP_COUNTER = "port1_in_octets"
WRAP_AT_LOCAL = "2026-03-10 14:07"          # first sample whose value is below the previous one
RESTART_DOWN_LOCAL = "2026-03-25 22:40"     # no rows from here ...
RESTART_UP_LOCAL = "2026-03-25 22:46"       # ... to here; all octet counters restart from 0
PORT_IDLE = 0.08
PORT_NOISE_SIGMA = 0.3
OUT_RATIO = 0.6                              # out octets = 0.6 * in octets (before noise)


def port_in_rate(port: int) -> float:
    """Mean octets/s at activity 1.0 on a switch port's inbound side."""
    return 1500.0 if port == 1 else 200.0 + 100.0 * ((port * 7) % 9)


# --------------------------------------------------------------------------------------------
# Scenario records (what tests and docs read)
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ScaleSpec:
    """How much data a scale writes."""

    name: str
    weeks: int
    interval_s: int
    per_core_cpus: int          # Processor(0..n-1) instances per hypervisor host
    host_extras: bool           # second disk, second NIC, backupd process
    pools: tuple[str, ...]
    fs_cpus: int
    fs_disks: tuple[str, ...]
    switch_ports: int


SCALES: dict[str, ScaleSpec] = {
    "small": ScaleSpec("small", 4, 60, 0, False, ("vdi", "files"), 4, ("sda", "sdb"), 6),
    "large": ScaleSpec("large", 8, 15, 16, True, ("vdi", "files", "archive"), 8,
                       ("sda", "sdb", "sdc", "sdd"), 24),
}


@dataclass(frozen=True)
class Malformed:
    """One deliberately bad line; {interval} in texts stands for the sampling interval."""

    key: str
    file: str                 # relative to the output directory, same name at every scale
    action: str               # insert-before | replace-cell | replace-line
    anchor: str               # edit at the first line starting with this ...
    anchor_end: str           # ... and ending with this
    text: str                 # new time cell / new cell / new line
    column: int               # field index for replace-cell
    marker: str               # the bad line in the written file starts with this
    problem: str
    ingest_should: str
    rows_quarantined: int
    cells_quarantined: int
    values_lost: int          # loadable values this edit removed (inserted rows remove none)
    line_small: int           # 1-based line number in the small-scale file

    def fill(self, text: str, interval_s: int) -> str:
        return text.replace("{interval}", str(interval_s))


MALFORMED: tuple[Malformed, ...] = (
    Malformed("bad-timestamp", "vdi-hv01/vdi-hv01_20260302.csv", "insert-before",
              '"03/04/2026 10:00:00.', "", "03/04/2026 25:00:00.250", 0,
              '"03/04/2026 25:00:00.250"', "time cell has hour 25",
              "quarantine the row: unparseable time", 1, 0, 0, 3482),
    Malformed("n/a-cell", "vdi-hv02/vdi-hv02_20260309.csv", "replace-cell",
              '"03/11/2026 11:00:00.', "", "n/a", 2,
              '"03/11/2026 11:00:00.', "Memory\\Available MBytes cell is \"n/a\"",
              "quarantine the cell; the row's other values load", 0, 1, 1, 3542),
    Malformed("dst-gap-time", "vdi-hv01/vdi-hv01_20260323.csv", "insert-before",
              '"03/29/2026 03:00:00.', "", "03/29/2026 02:30:00.250", 0,
              '"03/29/2026 02:30:00.250"',
              "local time does not exist (spring-forward gap 02:00-03:00)",
              "quarantine the row: nonexistent local time, never shifted", 1, 0, 0, 8762),
    Malformed("bad-value", "san01/san01_perf_20260309.csv", "replace-line",
              "read_latency_ms,2026-03-10T09:30:00Z,", ",files",
              "read_latency_ms,2026-03-10T09:30:00Z,ERR,san01,files", 0,
              "read_latency_ms,2026-03-10T09:30:00Z,ERR,", "value is \"ERR\"",
              "quarantine the row: non-numeric value", 1, 0, 1, 24847),
    Malformed("ragged-long", "san01/san01_perf_20260316.csv", "replace-line",
              "write_iops,2026-03-18T08:00:00Z,", ",vdi",
              "write_iops,2026-03-18T08:00:00Z,2210.5", 0,
              "write_iops,2026-03-18T08:00:00Z,2210.5", "3 fields where the header has 5",
              "quarantine the row: too few fields", 1, 0, 1, 41044),
    Malformed("ragged-activity", "fs01/fs01_activity_20260312.csv", "replace-line",
              "fs01;{interval};2026-03-12 09:15:00 UTC;2;", "",
              "fs01;{interval};2026-03-12 09:15:00 UTC;2;13.05", 0,
              "fs01;{interval};2026-03-12 09:15:00 UTC;2;13.05",
              "5 fields where the section header has 8 (line cut short)",
              "quarantine the row: too few fields", 1, 0, 4, 3080),
    Malformed("n/a-eu", "core-sw01/core-sw01_20260309.csv", "replace-cell",
              "12.03.2026 14:00:00;", "", "n/a", 2,
              "12.03.2026 14:00:00;", "temperature (°C) cell is \"n/a\"",
              "quarantine the cell; the row's other values load", 0, 1, 1, 5162),
)


@dataclass(frozen=True)
class Scenario:
    """All planted parameters in one place (values equal the module constants)."""

    organisation: str = ORGANISATION
    site: str = SITE
    tz: str = TZ
    start_local: str = START_LOCAL
    hosts: tuple[str, ...] = (*HV_HOSTS, ARRAY, FILE_SERVER, SWITCH)
    rhythm: dict[str, float] = field(default_factory=lambda: {
        "night_level": NIGHT_LEVEL, "logon_start_h": LOGON_START_H, "logon_end_h": LOGON_END_H,
        "surge_peak_h": SURGE_PEAK_H, "surge_sigma_h": SURGE_SIGMA_H,
        "surge_amplitude": SURGE_AMPLITUDE, "work_end_h": WORK_END_H,
        "evening_end_h": EVENING_END_H, "evening_level": EVENING_LEVEL,
        "late_end_h": LATE_END_H, "weekend_level": WEEKEND_LEVEL})
    busiest_weekday: int = BUSIEST_WEEKDAY
    busiest_factor: float = BUSIEST_FACTOR
    destage: dict[str, object] = field(default_factory=lambda: {
        "array": ARRAY, "metric": "write_latency_ms", "period_s": DESTAGE_PERIOD_S,
        "duration_s": DESTAGE_DURATION_S, "amplitude_ms": DESTAGE_AMPLITUDE_MS,
        "first_utc": DESTAGE_FIRST_UTC})
    scan: dict[str, object] = field(default_factory=lambda: {
        "host": SCAN_HOST, "process": SCAN_PROCESS, "weekday": SCAN_WEEKDAY,
        "start_h": SCAN_START_H, "duration_s": SCAN_DURATION_S,
        "host_cpu_pp": SCAN_HOST_CPU_PP, "process_pct": SCAN_PROCESS_PCT})
    lead: dict[str, object] = field(default_factory=lambda: {
        "array": ARRAY, "pool": LEAD_POOL, "leader": "queue_depth",
        "follower": "read_latency_ms", "lead_samples": LEAD_SAMPLES,
        "base_ms": READ_LAT_BASE_MS, "per_queue_ms": READ_LAT_PER_QUEUE_MS,
        "noise_sigma": READ_LAT_SIGMA})
    shift: dict[str, object] = field(default_factory=lambda: {
        "array": ARRAY, "pool": SHIFT_POOL, "metrics": SHIFT_METRICS,
        "at_local": SHIFT_AT_LOCAL, "factor": SHIFT_FACTOR})
    constants: dict[str, float] = field(default_factory=lambda: {
        **{f"\\\\{h}\\Memory\\Total MBytes": HOST_MEMORY_MB for h in HV_HOSTS},
        **{f"\\\\{h}\\Network Interface(vmnic0)\\Packets Received Errors": 0 for h in HV_HOSTS},
        **{f"{ARRAY} capacity_total_gb pool={p}": POOLS[p][4] for p in POOLS}})
    gap: dict[str, str] = field(default_factory=lambda: {
        "host": GAP_HOST, "start_local": GAP_START_LOCAL, "end_local": GAP_END_LOCAL})
    counters: dict[str, object] = field(default_factory=lambda: {
        "host": SWITCH, "modulus": COUNTER_MODULUS, "wrap_counter": WRAP_COUNTER,
        "wrap_at_local": WRAP_AT_LOCAL, "restart_down_local": RESTART_DOWN_LOCAL,
        "restart_up_local": RESTART_UP_LOCAL})
    malformed: tuple[Malformed, ...] = MALFORMED


SCENARIO = Scenario()

# --------------------------------------------------------------------------------------------
# Time grid
# --------------------------------------------------------------------------------------------


def local_to_utc_s(text: str) -> int:
    """Epoch seconds of a local wall-clock time in TZ (must exist and be unambiguous)."""
    return int(pd.Timestamp(text).tz_localize(TZ, ambiguous="raise",
                                              nonexistent="raise").timestamp())


def naive_s(text: str) -> int:
    """A wall-clock time as seconds, as if it were UTC (for comparisons in local time)."""
    return int(np.datetime64(text.replace(" ", "T"), "s").astype(np.int64))


def utc_text_s(text: str) -> int:
    return naive_s(text.rstrip("Z"))


@dataclass(frozen=True)
class Clock:
    """The sampling grid of the whole period, with local time and activity per sample."""

    interval_s: int
    utc_s: np.ndarray        # int64 epoch seconds
    local_s: np.ndarray      # int64 local wall clock as naive seconds
    weekday: np.ndarray      # local, Monday = 0
    hour: np.ndarray         # local hour of day, float
    act: np.ndarray          # desktop activity (1.0 = weekday working level)
    surge: np.ndarray        # the log-on surge part of act
    occupancy: np.ndarray    # share of desktops in session

    def __len__(self) -> int:
        return int(self.utc_s.size)

    def k_at_local(self, text: str) -> int:
        """Index of the first sample at or after a local time."""
        return int(np.searchsorted(self.local_s, naive_s(text)))


def _to_local(utc_s: np.ndarray) -> np.ndarray:
    idx = pd.DatetimeIndex(utc_s.astype("datetime64[s]")).tz_localize("UTC").tz_convert(TZ)
    return idx.tz_localize(None).to_numpy().astype("datetime64[s]").astype(np.int64)


def _base_profile(hour: np.ndarray) -> np.ndarray:
    xs = [0.0, LOGON_START_H, LOGON_END_H, WORK_END_H, EVENING_END_H, LATE_END_H, 24.0]
    ys = [NIGHT_LEVEL, NIGHT_LEVEL, 1.0, 1.0, EVENING_LEVEL, NIGHT_LEVEL, NIGHT_LEVEL]
    return np.interp(hour, xs, ys)


def _surge(hour: np.ndarray) -> np.ndarray:
    return SURGE_AMPLITUDE * np.exp(-0.5 * ((hour - SURGE_PEAK_H) / SURGE_SIGMA_H) ** 2)


def build_clock(spec: ScaleSpec) -> Clock:
    start = local_to_utc_s(START_LOCAL)
    end_local = pd.Timestamp(START_LOCAL) + pd.Timedelta(days=7 * spec.weeks)
    end = local_to_utc_s(str(end_local))
    utc = start + np.arange((end - start) // spec.interval_s, dtype=np.int64) * spec.interval_s
    local = _to_local(utc)
    weekday = ((local // 86400) + 3) % 7
    hour = (local % 86400) / 3600.0
    weekend = weekday >= 5
    factor = np.where(weekday == BUSIEST_WEEKDAY, BUSIEST_FACTOR, 1.0)
    surge = np.where(weekend, 0.0, factor * _surge(hour))
    act = np.where(weekend, WEEKEND_LEVEL, factor * _base_profile(hour) + surge)
    occupancy = SESSION_OCCUPANCY * np.where(weekend, WEEKEND_LEVEL, _base_profile(hour))
    return Clock(spec.interval_s, utc, local, weekday, hour, act, surge, occupancy)


def windows(clock: Clock, days: int) -> list[tuple[str, slice]]:
    """Consecutive local-time windows of `days` days: (YYYYMMDD of the first day, slice)."""
    out: list[tuple[str, slice]] = []
    b = naive_s(START_LOCAL)
    while b <= clock.local_s[-1]:
        i0, i1 = np.searchsorted(clock.local_s, [b, b + days * 86400])
        label = str(np.datetime64(b, "s").astype("datetime64[D]")).replace("-", "")
        out.append((label, slice(int(i0), int(i1))))
        b += days * 86400
    return out


# --------------------------------------------------------------------------------------------
# Text formatting (vectorised)
# --------------------------------------------------------------------------------------------


def text_of(values: np.ndarray) -> pa.Array:
    """Integers as decimal text."""
    return pc.cast(pa.array(np.asarray(values, dtype=np.int64)), pa.string())


def padded(values: np.ndarray, width: int) -> pa.Array:
    return pc.utf8_lpad(text_of(values), width, "0")


def join(parts: Sequence[pa.Array | str], sep: str = "") -> pa.Array:
    """Element-wise concatenation of text columns (str parts are broadcast) with `sep` between."""
    return pc.binary_join_element_wise(*(pa.scalar(x) if isinstance(x, str) else x
                                         for x in parts), sep)


def fmt_fixed(x: np.ndarray, decimals: int, sep: str = ".") -> pa.Array:
    """Numbers as text with a fixed number of decimals (and `sep` as decimal mark)."""
    scale = 10 ** decimals
    n = np.rint(np.asarray(x, dtype=np.float64) * scale).astype(np.int64)
    a = np.abs(n)
    out = text_of(a // scale)
    if decimals:
        out = join([out, padded(a % scale, decimals)], sep)
    negative = n < 0
    if negative.any():
        out = pc.if_else(pa.array(negative), join(["-", out]), out)
    return out


@dataclass(frozen=True)
class _Parts:
    Y: pa.Array
    m: pa.Array
    d: pa.Array
    H: pa.Array
    M: pa.Array
    S: pa.Array


def _parts(secs: np.ndarray) -> _Parts:
    days = secs // 86400
    sod = secs - days * 86400
    months = days.astype("datetime64[D]").astype("datetime64[M]")
    year = months.astype("datetime64[Y]").astype(np.int64) + 1970
    month = months.astype(np.int64) % 12 + 1
    day = days - months.astype("datetime64[D]").astype(np.int64) + 1
    return _Parts(text_of(year), padded(month, 2), padded(day, 2), padded(sod // 3600, 2),
                  padded(sod // 60 % 60, 2), padded(sod % 60, 2))


def ts_mdy_ms(local_s: np.ndarray, ms: np.ndarray) -> pa.Array:
    p = _parts(local_s)
    return join([p.m, "/", p.d, "/", p.Y, " ", p.H, ":", p.M, ":", p.S, ".", padded(ms, 3)])


def ts_iso_z(utc_s: np.ndarray) -> pa.Array:
    p = _parts(utc_s)
    return join([p.Y, "-", p.m, "-", p.d, "T", p.H, ":", p.M, ":", p.S, "Z"])


def ts_ymd_utc(utc_s: np.ndarray) -> pa.Array:
    p = _parts(utc_s)
    return join([p.Y, "-", p.m, "-", p.d, " ", p.H, ":", p.M, ":", p.S, " UTC"])


def ts_dmy(local_s: np.ndarray) -> pa.Array:
    p = _parts(local_s)
    return join([p.d, ".", p.m, ".", p.Y, " ", p.H, ":", p.M, ":", p.S])


def repeat_each(arr: pa.Array, times: int) -> pa.Array:
    return arr.take(pa.array(np.repeat(np.arange(len(arr)), times)))


def tile(labels: Sequence[str], times: int) -> pa.Array:
    return pa.array(list(labels), pa.string()).take(pa.array(np.tile(np.arange(len(labels)), times)))


def lognorm(rng: np.random.Generator, sigma: float, shape: int | tuple[int, ...]) -> np.ndarray:
    """Median-1 lognormal factors (right-skewed noise)."""
    return rng.lognormal(0.0, sigma, shape)


# --------------------------------------------------------------------------------------------
# Output bookkeeping and malformed rows
# --------------------------------------------------------------------------------------------


@dataclass
class FileReport:
    path: Path
    layout: str
    rows: int
    values: int


@dataclass
class Report:
    files: list[FileReport] = field(default_factory=list)

    @property
    def values(self) -> int:
        return sum(f.values for f in self.files)

    @property
    def bytes(self) -> int:
        return sum(f.path.stat().st_size for f in self.files)


def _find(lines: list[str], m: Malformed, interval_s: int) -> int:
    start, end = m.fill(m.anchor, interval_s), m.fill(m.anchor_end, interval_s)
    for i, line in enumerate(lines):
        if line.startswith(start) and line.endswith(end):
            return i
    raise RuntimeError(f"scenario anchor not found in {m.file}: {start!r}")


def _edit(lines: list[str], m: Malformed, interval_s: int, delimiter: str, quoted: bool) -> None:
    i = _find(lines, m, interval_s)
    text = m.fill(m.text, interval_s)
    if m.action == "replace-line":
        lines[i] = text
    elif m.action == "insert-before":
        cells = lines[i].split(delimiter)
        cells[0] = f'"{text}"' if quoted else text
        lines.insert(i, delimiter.join(cells))
    elif m.action == "replace-cell":
        cells = lines[i].split(delimiter)
        cells[m.column] = f'"{text}"' if quoted else text
        lines[i] = delimiter.join(cells)
    else:
        raise ValueError(m.action)


Doc = list[str | pa.Array]                 # a file's lines: header strings and row arrays


def _doc_lines(doc: Doc) -> list[str]:
    out: list[str] = []
    for piece in doc:
        out.extend([piece] if isinstance(piece, str) else piece.to_pylist())
    return out


def plant_malformed(rel: str, doc: Doc, interval_s: int, delimiter: str,
                    quoted: bool = False) -> tuple[Doc, int]:
    """Apply the scenario's malformed rows to one file: (new doc, loadable values lost)."""
    edits = [m for m in MALFORMED if m.file == rel]
    if not edits:
        return doc, 0
    lines = _doc_lines(doc)
    for m in edits:
        _edit(lines, m, interval_s, delimiter, quoted)
    edited: Doc = [*lines]
    return edited, sum(m.values_lost for m in edits)


def _array_bytes(rows: pa.Array, eol: str) -> bytes:
    """The rows' UTF-8 bytes, each followed by eol."""
    if len(rows) == 0:
        return b""
    ended = pc.binary_join_element_wise(rows, pa.scalar(""), eol)
    offsets = np.frombuffer(ended.buffers()[1], dtype=np.int32)
    first, last = offsets[ended.offset], offsets[ended.offset + len(ended)]
    return ended.buffers()[2].to_pybytes()[first:last]


def write_doc(path: Path, doc: Doc, *, encoding: str, eol: str) -> None:
    """Write a file as a collector would: utf-8, utf-8-bom, utf-16-le-bom or cp1252."""
    path.parent.mkdir(parents=True, exist_ok=True)
    data = b"".join((p + eol).encode("utf-8") if isinstance(p, str) else _array_bytes(p, eol)
                    for p in doc)
    if encoding == "utf-8-bom":
        data = b"\xef\xbb\xbf" + data
    elif encoding == "utf-16-le-bom":
        data = b"\xff\xfe" + data.decode("utf-8").encode("utf-16-le")
    elif encoding != "utf-8":
        data = data.decode("utf-8").encode(encoding)
    path.write_bytes(data)


def doc_rows(doc: Doc) -> int:
    """Data rows: lines that are not headers (the first line, and '#' section lines)."""
    return sum(len(p) if not isinstance(p, str) else 1 for p in doc) - _headers(doc)


def _headers(doc: Doc) -> int:
    return sum(1 for i, p in enumerate(doc) if isinstance(p, str) and (i == 0 or p.startswith("#")))


# --------------------------------------------------------------------------------------------
# Hypervisor hosts: counter-paths layout, one file per host per local week
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Column:
    name: str
    values: np.ndarray
    decimals: int
    is_rate: bool = False     # blank in the first row of each logging run


def _scan_mask(host: str, clock: Clock, sl: slice) -> np.ndarray:
    if host != SCAN_HOST:
        return np.zeros(sl.stop - sl.start, dtype=bool)
    sod = clock.local_s[sl] % 86400
    start = int(SCAN_START_H * 3600)
    return (clock.weekday[sl] == SCAN_WEEKDAY) & (sod >= start) & (sod < start + SCAN_DURATION_S)


def _hv_base_columns(host: str, clock: Clock, sl: slice, rng: np.random.Generator) -> list[Column]:
    act, n = clock.act[sl], sl.stop - sl.start
    scan = _scan_mask(host, clock, sl)
    sessions = rng.binomial(DESKTOPS_PER_HOST, clock.occupancy[sl]).astype(np.float64)
    cpu = CPU_FLOOR_PCT + CPU_SPAN_PCT * act + SCAN_HOST_CPU_PP * scan
    cpu = np.clip(cpu + rng.normal(0.0, CPU_NOISE_SD, n), 0.5, 100.0)
    avail = HOST_MEMORY_MB - HOST_RESERVED_MB - MB_PER_SESSION * sessions + rng.normal(0, 512, n)
    disk_lat = np.maximum(0.0012 * (1 + 0.5 * act) * lognorm(rng, 0.3, n), 0.0001)
    disk_xfer = (15.0 + 120.0 * act) * lognorm(rng, 0.15, n)
    nic = (1.5e6 + 4.0e7 * act) * lognorm(rng, 0.2, n)
    scan_pct = SCAN_IDLE_PCT * lognorm(rng, 0.5, n) + scan * (SCAN_PROCESS_PCT + rng.normal(0, 30, n))
    sessiond = (0.5 + 60.0 * clock.surge[sl] + 3.0 * act) * lognorm(rng, 0.2, n)
    h = f"\\\\{host}\\"
    return [
        Column(h + "Processor(_Total)\\% Processor Time", cpu, 3, True),
        Column(h + "Memory\\Available MBytes", avail, 0),
        Column(h + "Memory\\Total MBytes", np.full(n, float(HOST_MEMORY_MB)), 0),
        Column(h + "PhysicalDisk(0 C:)\\Avg. Disk sec/Transfer", disk_lat, 6, True),
        Column(h + "PhysicalDisk(0 C:)\\Disk Transfers/sec", disk_xfer, 3, True),
        Column(h + "Network Interface(vmnic0)\\Bytes Total/sec", nic, 1, True),
        Column(h + "Network Interface(vmnic0)\\Packets Received Errors", np.zeros(n), 0),
        Column(h + f"Process({SCAN_PROCESS})\\% Processor Time", scan_pct, 3, True),
        Column(h + "Process(sessiond#1)\\% Processor Time", sessiond, 3, True),
        Column(h + "Desktop Sessions\\Active Sessions", sessions, 0),
    ]


def _hv_extra_columns(host: str, clock: Clock, sl: slice, rng: np.random.Generator,
                      spec: ScaleSpec, cpu: np.ndarray) -> list[Column]:
    act, n = clock.act[sl], sl.stop - sl.start
    h = f"\\\\{host}\\"
    cols = [Column(h + f"Processor({i})\\% Processor Time",
                   np.clip(cpu + rng.normal(0.0, 6.0, n), 0.0, 100.0), 3, True)
            for i in range(spec.per_core_cpus)]
    if spec.host_extras:
        cols += [
            Column(h + "PhysicalDisk(1 D:)\\Avg. Disk sec/Transfer",
                   np.maximum(0.0020 * (1 + 0.3 * act) * lognorm(rng, 0.35, n), 0.0001), 6, True),
            Column(h + "PhysicalDisk(1 D:)\\Disk Transfers/sec",
                   (5.0 + 40.0 * act) * lognorm(rng, 0.2, n), 3, True),
            Column(h + "Network Interface(vmnic1 (uplink A/B, #2))\\Bytes Total/sec",
                   (8.0e5 + 1.5e7 * act) * lognorm(rng, 0.25, n), 1, True),
            Column(h + "Process(backupd)\\% Processor Time", 0.2 * lognorm(rng, 0.6, n), 3, True),
        ]
    return cols


def _hv_keep(host: str, clock: Clock, sl: slice) -> np.ndarray:
    local = clock.local_s[sl]
    if host != GAP_HOST:
        return np.ones(local.size, dtype=bool)
    return (local < naive_s(GAP_START_LOCAL)) | (local >= naive_s(GAP_END_LOCAL))


def _run_starts(keep: np.ndarray) -> np.ndarray:
    """Among kept rows: True for the first row of the file and the first after a gap."""
    k = np.flatnonzero(keep)
    first = np.ones(k.size, dtype=bool)
    first[1:] = np.diff(k) > 1
    return first


def hv_lines(cols: list[Column], clock: Clock, sl: slice, keep: np.ndarray,
             ms: np.ndarray) -> tuple[Doc, int]:
    """Header + rows of one counter-paths file, and the number of numeric cells."""
    starts = _run_starts(keep)
    cells = [ts_mdy_ms(clock.local_s[sl][keep], ms[keep])]
    blank = pa.array(starts)
    for c in cols:
        s = fmt_fixed(c.values[keep], c.decimals)
        cells.append(pc.if_else(blank, pa.scalar(" "), s) if c.is_rate else s)
    header = ",".join(f'"{x}"' for x in [LOGGER_NOTE, *(c.name for c in cols)])
    rows = join(['"', join(cells, '","'), '"'])
    blanks = int(starts.sum()) * sum(c.is_rate for c in cols)
    return [header, rows], len(rows) * len(cols) - blanks


def write_hypervisor(out: Path, host: str, clock: Clock, spec: ScaleSpec,
                     rng: np.random.Generator, report: Report) -> None:
    encoding = "utf-16-le-bom" if host == HV_UTF16_HOST else "utf-8-bom"
    for label, sl in windows(clock, 7):
        n = sl.stop - sl.start
        ms = rng.integers(110, 140, n)
        cols = _hv_base_columns(host, clock, sl, rng)
        cols += _hv_extra_columns(host, clock, sl, rng, spec, cols[0].values)
        keep = _hv_keep(host, clock, sl)
        doc, values = hv_lines(cols, clock, sl, keep, ms)
        rel = f"{host}/{host}_{label}.csv"
        doc, lost = plant_malformed(rel, doc, spec.interval_s, ",", quoted=True)
        write_doc(out / rel, doc, encoding=encoding, eol="\r\n")
        report.files.append(FileReport(out / rel, "counter-paths", doc_rows(doc), values - lost))


# --------------------------------------------------------------------------------------------
# Storage array: long layout (metric,ts,value,device,pool), ISO UTC, one file per local week
# --------------------------------------------------------------------------------------------


@dataclass
class SanState:
    innovations: dict[str, np.ndarray]     # last QUEUE_AR_TAPS - 1 queue innovations per pool
    queue_tail: dict[str, np.ndarray]      # last LEAD_SAMPLES queue depths per pool


def _queue_floor(pool: str) -> float:
    r, _, w, _, _ = POOLS[pool]
    return QUEUE_BASE + (r + w) * QUEUE_PER_IOPS


def new_san_state(spec: ScaleSpec) -> SanState:
    return SanState({p: np.zeros(QUEUE_AR_TAPS - 1) for p in spec.pools},
                    {p: np.full(LEAD_SAMPLES, _queue_floor(p)) for p in spec.pools})


def destage_mask(utc_s: np.ndarray) -> np.ndarray:
    return (utc_s - utc_text_s(DESTAGE_FIRST_UTC)) % DESTAGE_PERIOD_S < DESTAGE_DURATION_S


def _queue_noise(pool: str, n: int, rng: np.random.Generator, state: SanState) -> np.ndarray:
    e = np.concatenate([state.innovations[pool], rng.normal(0.0, QUEUE_AR_SD, n)])
    taps = QUEUE_AR_PHI ** np.arange(QUEUE_AR_TAPS)
    state.innovations[pool] = e[-(QUEUE_AR_TAPS - 1):]
    return np.convolve(e, taps, mode="valid")


def san_pool(pool: str, clock: Clock, sl: slice, rng: np.random.Generator,
             state: SanState) -> dict[str, np.ndarray]:
    act, n = clock.act[sl], sl.stop - sl.start
    rb, rs, wb, ws, cap = POOLS[pool]
    shifted = (pool == SHIFT_POOL) & (clock.utc_s[sl] >= local_to_utc_s(SHIFT_AT_LOCAL))
    gain = np.where(shifted, SHIFT_FACTOR, 1.0)
    read = (rb + rs * act) * gain * lognorm(rng, IOPS_NOISE_SIGMA, n)
    write = (wb + ws * act) * gain * lognorm(rng, IOPS_NOISE_SIGMA, n)
    queue = np.maximum(QUEUE_BASE + (read + write) * QUEUE_PER_IOPS
                       + _queue_noise(pool, n, rng, state), 0.05)
    queue = np.round(queue, 2)
    lagged = np.concatenate([state.queue_tail[pool], queue])[:n]
    state.queue_tail[pool] = queue[-LEAD_SAMPLES:]
    read_lat = (READ_LAT_BASE_MS + READ_LAT_PER_QUEUE_MS * lagged) * lognorm(rng, READ_LAT_SIGMA, n)
    write_lat = ((WRITE_LAT_BASE_MS + WRITE_LAT_PER_QUEUE_MS * queue) * lognorm(rng, WRITE_LAT_SIGMA, n)
                 + DESTAGE_AMPLITUDE_MS * destage_mask(clock.utc_s[sl]))
    return {"read_iops": read, "write_iops": write, "read_latency_ms": read_lat,
            "write_latency_ms": write_lat, "queue_depth": queue,
            "capacity_total_gb": np.full(n, float(cap))}


def san_lines(values: dict[str, dict[str, np.ndarray]], utc_s: np.ndarray,
              pools: Sequence[str]) -> Doc:
    """Rows ordered by time, then metric, then pool."""
    keys = [(m, p) for m in SAN_METRICS for p in pools]
    n, j = utc_s.size, len(keys)
    by_key = pa.concat_arrays([fmt_fixed(values[p][m], SAN_DECIMALS[m]) for m, p in keys])
    text = by_key.take(pa.array((np.arange(j)[None, :] * n + np.arange(n)[:, None]).ravel()))
    rows = join([tile([m for m, _ in keys], n), repeat_each(ts_iso_z(utc_s), j), text, ARRAY,
                 tile([p for _, p in keys], n)], ",")
    return ["metric,ts,value,device,pool", rows]


def write_array(out: Path, clock: Clock, spec: ScaleSpec, rng: np.random.Generator,
                report: Report) -> None:
    state = new_san_state(spec)
    for label, sl in windows(clock, 7):
        values = {p: san_pool(p, clock, sl, rng, state) for p in spec.pools}
        doc = san_lines(values, clock.utc_s[sl], spec.pools)
        rel = f"{ARRAY}/{ARRAY}_perf_{label}.csv"
        doc, lost = plant_malformed(rel, doc, spec.interval_s, ",")
        write_doc(out / rel, doc, encoding="utf-8", eol="\n")
        report.files.append(FileReport(out / rel, "long", doc_rows(doc), doc_rows(doc) - lost))


# --------------------------------------------------------------------------------------------
# File server: activity layout, CPU and disk sections, one file per local day
# --------------------------------------------------------------------------------------------

CPU_HEADER = "# hostname;interval;timestamp;CPU;%user;%system;%iowait;%idle"
DISK_HEADER = "# hostname;interval;timestamp;DEV;tps;rkB/s;wkB/s;await;%util"


def _fs_cpu_cents(act: np.ndarray, cpus: int, rng: np.random.Generator) -> list[np.ndarray]:
    """user, system, iowait, idle in hundredths of a percent; column 0 is the all-CPU row."""
    n = act.size
    bias = np.linspace(1.15, 0.85, cpus)
    user = (1.5 + 22.0 * act)[:, None] * bias * lognorm(rng, 0.25, (n, cpus))
    system = (0.8 + 5.0 * act)[:, None] * bias * lognorm(rng, 0.2, (n, cpus))
    iowait = (0.2 + 3.0 * act)[:, None] * lognorm(rng, 0.6, (n, cpus))
    busy = user + system + iowait
    squeeze = np.minimum(1.0, 98.0 / busy)
    out = []
    for m in (user, system, iowait):
        m = m * squeeze
        m = np.concatenate([m.mean(axis=1, keepdims=True), m], axis=1)
        out.append(np.rint(m * 100).astype(np.int64))
    out.append(10000 - out[0] - out[1] - out[2])
    return out


def _fs_disk(act: np.ndarray, disks: Sequence[str], rng: np.random.Generator) -> list[np.ndarray]:
    n, d = act.size, len(disks)
    weight = np.array([0.1 if x == "sda" else 1.0 / (1 + i) for i, x in enumerate(disks)])
    a = act[:, None] * weight
    tps = (3.0 + 400.0 * a) * lognorm(rng, 0.2, (n, d))
    rkb = (20.0 + 12000.0 * a) * lognorm(rng, 0.3, (n, d))
    wkb = (40.0 + 5000.0 * a) * lognorm(rng, 0.3, (n, d))
    wait = 1.5 * (1 + 1.0 * a) * lognorm(rng, 0.35, (n, d))
    util = np.clip((2.0 + 55.0 * a) * lognorm(rng, 0.1, (n, d)), 0.0, 100.0)
    return [tps, rkb, wkb, wait, util]


def _section(ts: pa.Array, interval_s: int, inst: Sequence[str],
             cols: list[pa.Array]) -> pa.Array:
    j = len(inst)
    return join([FILE_SERVER, str(interval_s), repeat_each(ts, j), tile(inst, len(ts)), *cols], ";")


def _cells(matrix: np.ndarray, decimals: int) -> pa.Array:
    """Row-major text of a (samples, instances) matrix."""
    return fmt_fixed(matrix.ravel(), decimals)


def fs_lines(clock: Clock, sl: slice, spec: ScaleSpec, rng: np.random.Generator) -> Doc:
    act = clock.act[sl]
    ts = ts_ymd_utc(clock.utc_s[sl])
    cpu = [_cells(c / 100.0, 2) for c in _fs_cpu_cents(act, spec.fs_cpus, rng)]
    disk = [_cells(c, 2) for c in _fs_disk(act, spec.fs_disks, rng)]
    cpus = ["-1", *(str(i) for i in range(spec.fs_cpus))]
    return [CPU_HEADER, _section(ts, spec.interval_s, cpus, cpu),
            DISK_HEADER, _section(ts, spec.interval_s, spec.fs_disks, disk)]


def write_file_server(out: Path, clock: Clock, spec: ScaleSpec, rng: np.random.Generator,
                      report: Report) -> None:
    per_ts = (spec.fs_cpus + 1) * 4 + len(spec.fs_disks) * 5
    for label, sl in windows(clock, 1):
        doc = fs_lines(clock, sl, spec, rng)
        rel = f"{FILE_SERVER}/{FILE_SERVER}_activity_{label}.csv"
        doc, lost = plant_malformed(rel, doc, spec.interval_s, ";")
        write_doc(out / rel, doc, encoding="utf-8", eol="\n")
        values = (sl.stop - sl.start) * per_ts - lost
        report.files.append(FileReport(out / rel, "activity", doc_rows(doc), values))


# --------------------------------------------------------------------------------------------
# Core switch: European wide layout, 32-bit octet totals, one file per local week
# --------------------------------------------------------------------------------------------


@dataclass
class SwitchState:
    total: np.ndarray            # running totals since boot (unwrapped), one per counter
    previous: np.ndarray         # last written value per counter (for the wrap check)
    decreases: np.ndarray        # how many times each written counter went down
    port1_in: np.ndarray         # the wrapping counter's increments for the whole period
    before_restart: np.ndarray | None = None   # values of the last row before the restart


def switch_names(spec: ScaleSpec) -> list[str]:
    return [f"port{p}_{d}_octets" for p in range(1, spec.switch_ports + 1) for d in ("in", "out")]


def _downtime(clock: Clock, sl: slice) -> np.ndarray:
    local = clock.local_s[sl]
    return (local >= naive_s(RESTART_DOWN_LOCAL)) & (local < naive_s(RESTART_UP_LOCAL))


def _increments(clock: Clock, sl: slice, rates: np.ndarray,
                rng: np.random.Generator) -> np.ndarray:
    n = sl.stop - sl.start
    load = (PORT_IDLE + clock.act[sl])[:, None] * rates * clock.interval_s
    inc = np.rint(load * lognorm(rng, PORT_NOISE_SIGMA, (n, rates.size))).astype(np.int64)
    inc[_downtime(clock, sl)] = 0
    if sl.start == 0:
        inc[0] = 0
    return inc


def _rates(spec: ScaleSpec) -> np.ndarray:
    return np.array([port_in_rate(p) * (1.0 if d == 0 else OUT_RATIO)
                     for p in range(1, spec.switch_ports + 1) for d in (0, 1)])


def new_switch_state(clock: Clock, spec: ScaleSpec, rng: np.random.Generator,
                     wrap_rng: np.random.Generator) -> SwitchState:
    """Start offsets; the wrapping counter's offset makes it wrap exactly at WRAP_AT_LOCAL."""
    port1 = _increments(clock, slice(0, len(clock)), _rates(spec)[:1], wrap_rng)[:, 0]
    k = clock.k_at_local(WRAP_AT_LOCAL)
    total = rng.integers(0, 2 ** 29, 2 * spec.switch_ports).astype(np.int64)
    total[0] = COUNTER_MODULUS - int(port1[: k + 1].sum()) + int(port1[k]) // 2
    names = len(total)
    return SwitchState(total, np.full(names, -1, dtype=np.int64), np.zeros(names, dtype=np.int64),
                       port1)


def switch_counters(clock: Clock, sl: slice, spec: ScaleSpec, rng: np.random.Generator,
                    state: SwitchState) -> np.ndarray:
    """Counter values (mod 2**32) for every sample of the window, downtime included."""
    inc = _increments(clock, sl, _rates(spec), rng)
    inc[:, 0] = state.port1_in[sl]
    cum = np.cumsum(inc, axis=0) + state.total
    up = clock.k_at_local(RESTART_UP_LOCAL)
    if sl.start <= up < sl.stop:
        i = up - sl.start
        state.before_restart = cum[i - 1] % COUNTER_MODULUS
        cum[i:] = np.cumsum(inc[i:], axis=0)
    state.total = cum[-1].copy()
    return cum % COUNTER_MODULUS


def _track_decreases(values: np.ndarray, state: SwitchState) -> None:
    seq = np.concatenate([state.previous[None, :], values], axis=0)
    state.decreases += ((np.diff(seq, axis=0) < 0) & (seq[:-1] >= 0)).sum(axis=0)
    state.previous = values[-1].copy()


def switch_lines(clock: Clock, sl: slice, spec: ScaleSpec, rng: np.random.Generator,
                 state: SwitchState) -> tuple[Doc, int]:
    act, n = clock.act[sl], sl.stop - sl.start
    cpu = np.clip(8.0 + 20.0 * act + rng.normal(0.0, 1.5, n), 0.0, 100.0)
    temp = 36.0 + 3.0 * act + rng.normal(0.0, 0.25, n)
    octets = switch_counters(clock, sl, spec, rng, state)
    keep = ~_downtime(clock, sl)
    _track_decreases(octets[keep], state)
    cells = [ts_dmy(clock.local_s[sl][keep]), fmt_fixed(cpu[keep], 1, ","),
             fmt_fixed(temp[keep], 1, ",")]
    cells += [text_of(octets[keep, j]) for j in range(octets.shape[1])]
    header = ";".join(["Zeit", "cpu_load (%)", "temperature (°C)", *switch_names(spec)])
    rows = join(cells, ";")
    return [header, rows], len(rows) * (len(cells) - 1)


def _check_switch(state: SwitchState) -> None:
    expected = np.ones_like(state.decreases)
    expected[0] = 2           # the planted wrap, then the restart
    if not np.array_equal(state.decreases, expected):
        raise RuntimeError(f"switch counters broke the scenario: decreases {state.decreases}")
    # below 2**31 before the restart, so the drop to ~0 cannot be read as a 32-bit wrap
    if state.before_restart is None or (state.before_restart >= 2 ** 31).any():
        raise RuntimeError("switch counters broke the scenario: restart looks like a wrap")


def write_switch(out: Path, clock: Clock, spec: ScaleSpec, rng: np.random.Generator,
                 wrap_rng: np.random.Generator, report: Report) -> None:
    state = new_switch_state(clock, spec, rng, wrap_rng)
    for label, sl in windows(clock, 7):
        doc, values = switch_lines(clock, sl, spec, rng, state)
        rel = f"{SWITCH}/{SWITCH}_{label}.csv"
        doc, lost = plant_malformed(rel, doc, spec.interval_s, ";")
        write_doc(out / rel, doc, encoding="cp1252", eol="\r\n")
        report.files.append(FileReport(out / rel, "wide (European)", doc_rows(doc), values - lost))
    _check_switch(state)


# --------------------------------------------------------------------------------------------
# Entry points
# --------------------------------------------------------------------------------------------


def _rng(seed: int, stream: int) -> np.random.Generator:
    return np.random.default_rng([seed, stream])


def generate_report(out_dir: str | Path, *, scale: str = "small",
                    seed: int = DEFAULT_SEED) -> Report:
    """Write every file of the scenario and say what was written."""
    if scale not in SCALES:
        raise ValueError(f"unknown scale {scale!r}; use one of {sorted(SCALES)}")
    spec, out, report = SCALES[scale], Path(out_dir), Report()
    out.mkdir(parents=True, exist_ok=True)
    clock = build_clock(spec)
    for i, host in enumerate(HV_HOSTS):
        write_hypervisor(out, host, clock, spec, _rng(seed, i), report)
    write_array(out, clock, spec, _rng(seed, 10), report)
    write_file_server(out, clock, spec, _rng(seed, 11), report)
    write_switch(out, clock, spec, _rng(seed, 12), _rng(seed, 13), report)
    report.files.sort(key=lambda f: f.path)
    return report


def generate(out_dir: str | Path, *, scale: str = "small", seed: int = DEFAULT_SEED) -> list[Path]:
    """Write the scenario's CSV files under out_dir; returns their paths, sorted."""
    return [f.path for f in generate_report(out_dir, scale=scale, seed=seed).files]


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m seed.generate", description=__doc__.split("\n")[0])
    parser.add_argument("out_dir", type=Path)
    parser.add_argument("--scale", choices=sorted(SCALES), default="small")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    args = parser.parse_args(argv)
    started = time.perf_counter()
    report = generate_report(args.out_dir, scale=args.scale, seed=args.seed)
    took = time.perf_counter() - started
    for f in report.files:
        print(f"{f.path}\t{f.layout}\t{f.rows} rows\t{f.values} values")
    print(f"{len(report.files)} files, {report.bytes:,} bytes, {report.values:,} values,"
          f" {took:.1f} s ({args.scale}, seed {args.seed})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
