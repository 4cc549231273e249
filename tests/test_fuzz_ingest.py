"""Fuzzed ingest: generated CSV files with every kind of damage, checked against what was written.

Each case is built from a model (rows, their times, each cell's intent) and written in a random
encoding, delimiter, quoting and decimal mark. The expected outcome is worked out from the model
alone, by the documented rules (README, docs/layouts.md, DEVELOPERS.md):
- a row with the wrong number of fields, an unreadable time, or a local time that does not exist
  or exists twice (DST) is quarantined whole;
- wide files: a later row with a time already loaded is quarantined (the first wins); in a
  loaded row each cell is a value (a finite number), missing (empty), or quarantined, and so is
  any text in a column whose header has no name;
- long files: a row whose metric is empty, or whose value is missing or not a finite number, is
  quarantined; of the remaining rows with the same counter and time the first wins.
The ingest must never raise, must account for every row, and must load exactly the values the
model says are parsable, grouped into the same counters.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from zoneinfo import ZoneInfo

import duckdb
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from warehouse.errors import BadInputError
from warehouse.home import CATALOG, init_home
from warehouse.ingest.detect import detect
from warehouse.ingest.model import WideBatch
from warehouse.ingest.read import FileReader
from warehouse.ingest.run import IngestOptions, ingest_files

ZONE = "Europe/Berlin"
CASES = 520          # through detect and the reader: the issue asks for at least 500 in CI
INGEST_CASES = 25    # through the whole ingest (catalog, Parquet, quarantine file): ~0.3 s each

# Cell intents: ("num", value) loaded; ("missing", None) nothing; ("bad", None) quarantined.
_NUMBER_FORMS = ("{:.3f}", "{:.6g}", "{:e}", "{:.0f}", " {:.2f} ")
_BAD_CELLS = ("n/a", "-", "NaN", "nan", "inf", "-Infinity", "x" * 5000, "9" * 400, "1\x002", "\x00", "12abc",
              "1.2.3", "--5", "   ")
_MISSING_CELLS = ("", " ")
_NAME_CHARS = "abcxyz _%'()/µé;|\t\",0123"


@dataclass
class Row:
    time: str               # the time cell as written
    cells: list[tuple[str, str, float | None]]   # (intent, text, value)
    ragged: int = 0         # fields added (>0) or dropped (<0)
    metric: str = "m0"      # long layout only
    host: str = "h0"        # long layout only
    text: str = ""          # the line as written


@dataclass
class Case:
    layout: str
    delimiter: str
    decimal: str
    encoding: str
    quote_all: bool
    names: list[str]
    rows: list[Row]
    blank_lines: bool = False
    notes: list[str] = field(default_factory=list)


def _utc(text: str) -> int | None:
    """Model of the time cell: UTC microseconds, or None when the row must be quarantined."""
    for fmt, zone in (("%Y-%m-%dT%H:%M:%SZ", timezone.utc), ("%Y-%m-%d %H:%M:%S", ZoneInfo(ZONE))):
        try:
            naive = datetime.strptime(text, fmt)
        except ValueError:
            continue
        if zone is timezone.utc:
            return int(naive.replace(tzinfo=timezone.utc).timestamp() * 1_000_000)
        early, late = naive.replace(tzinfo=zone, fold=0), naive.replace(tzinfo=zone, fold=1)
        if early.utcoffset() != late.utcoffset():
            return None   # the fall-back hour: ambiguous
        back = early.astimezone(timezone.utc).astimezone(zone).replace(tzinfo=None)
        if back != naive:
            return None   # the spring-forward gap: does not exist
        return int(early.timestamp() * 1_000_000)
    return None


@st.composite
def cells(draw: st.DrawFn, decimal: str) -> tuple[str, str, float | None]:
    kind = draw(st.sampled_from(["num"] * 6 + ["missing", "bad"]))
    if kind == "missing":
        return ("missing", draw(st.sampled_from(_MISSING_CELLS)), None)
    if kind == "bad":
        return ("bad", draw(st.sampled_from(_BAD_CELLS)), None)
    value = draw(st.floats(-1e6, 1e6, allow_nan=False).map(lambda v: round(v, 3)))
    text = draw(st.sampled_from(_NUMBER_FORMS)).format(value)
    if decimal == ",":
        text = text.replace(".", ",")
    return ("num", text, float(text.strip().replace(",", ".")))


def _times(draw: st.DrawFn, n: int) -> list[str]:
    local = draw(st.booleans())
    if local:   # naive local times around a clock change of the warehouse zone
        start = draw(st.sampled_from([datetime(2026, 3, 29, 1, 0), datetime(2026, 10, 25, 1, 30),
                                      datetime(2026, 3, 2, 8, 0)]))
        fmt = "%Y-%m-%d %H:%M:%S"
    else:
        start, fmt = datetime(2026, 3, 2, 23, 50), "%Y-%m-%dT%H:%M:%SZ"   # crosses a UTC day
    step = timedelta(seconds=draw(st.sampled_from([15, 600, 900])))
    out = [(start + i * step).strftime(fmt) for i in range(n)]
    for i in range(n):
        twist = draw(st.sampled_from(["keep"] * 8 + ["dup", "swap", "bad", "empty"]))
        if twist == "dup" and i:
            out[i] = out[i - 1]
        elif twist == "swap" and i:
            out[i], out[i - 1] = out[i - 1], out[i]
        elif twist == "bad":
            out[i] = draw(st.sampled_from(["not a time", "2026-13-45 99:99:99", "2026-03-02T08:00:60Z"]))
        elif twist == "empty":
            out[i] = ""
    return out


@st.composite
def cases(draw: st.DrawFn) -> Case:
    layout = draw(st.sampled_from(["wide", "long"]))
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    decimal = "," if delimiter == ";" and draw(st.booleans()) else "."
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "cp1252"]))
    n = draw(st.integers(3, 24))
    times = _times(draw, n)
    if layout == "wide":
        k = draw(st.integers(1, 4))
        names: list[str] = []
        for j in range(k):
            pick = draw(st.sampled_from(["plain", "plain", "odd", "dup", "empty"]))
            if pick == "dup" and names:
                names.append(names[-1])
            elif pick == "empty":
                names.append("")
            elif pick == "odd":
                names.append("n" + draw(st.text(_NAME_CHARS, min_size=1, max_size=12)).strip())
            else:
                names.append(f"counter{j} (ms)")
        rows = [Row(t, [draw(cells(decimal)) for _ in range(k)]) for t in times]
    else:
        names = ["value"]
        rows = [Row(t, [draw(cells(decimal))], metric=draw(st.sampled_from(["m0", "m1", "read (ms)", ""])),
                    host=draw(st.sampled_from(["h0", "h;1", "h\"2", ""]))) for t in times]
    for row in rows[1:]:
        if draw(st.integers(0, 9)) == 0:
            row.ragged = draw(st.sampled_from([-1, 1, 2]))
    return Case(layout, delimiter, decimal, encoding, draw(st.booleans()), names, rows,
                blank_lines=draw(st.integers(0, 4)) == 0)


def _field(text: str, case: Case) -> str:
    needs = any(c in text for c in (case.delimiter, '"', "\n", "\r")) or text != text.strip() and text.strip()
    if case.quote_all or needs:
        return '"' + text.replace('"', '""') + '"'
    return text


def _encodable(case: Case, text: str) -> str:
    return text.encode(case.encoding, errors="replace").decode(case.encoding)


def write_case(case: Case, path: Path) -> None:
    if case.layout == "wide":
        header = ["timestamp"] + case.names
    else:
        header = ["host", "time", "metric", "value"]
    lines = [case.delimiter.join(_field(h, case) for h in header)]
    for row in case.rows:
        if case.layout == "wide":
            fields = [row.time] + [text for _, text, _ in row.cells]
        else:
            fields = [row.host, row.time, row.metric, row.cells[0][1]]
        if row.ragged > 0:
            fields += ["1"] * row.ragged
        elif row.ragged < 0:
            fields = fields[:row.ragged]
        row.text = case.delimiter.join(_field(f, case) for f in fields)
        lines.append(row.text)
        if case.blank_lines:
            lines.append("")
    text = "\n".join(lines) + "\n"
    path.write_bytes(_encodable(case, text).encode(case.encoding))


def _normalise(case: Case) -> Case:
    """cp1252 cannot hold every generated character: model what the file really holds."""
    for row in case.rows:
        row.host, row.metric = _encodable(case, row.host), _encodable(case, row.metric)
    case.names = [_encodable(case, n) for n in case.names]
    return case


@dataclass
class Expected:
    rows_read: int
    rows_loaded: int
    rows_quarantined: int
    cells_quarantined: int
    duplicates: int
    groups: list[list[tuple[int, float]]]
    reject_lines: list[int]


def expected(case: Case) -> Expected:
    """What the documented rules say this file holds (see the module docstring)."""
    loaded = quarantined = cells_bad = duplicates = 0
    groups: dict[tuple, list[tuple[int, float]]] = {}
    seen: set = set()
    reject_lines: list[int] = []
    step = 2 if case.blank_lines else 1
    rows = 0
    for i, row in enumerate(case.rows):
        line = 2 + i * step
        if not row.text:
            continue   # an empty line is no row at all
        rows += 1
        ts = _utc(row.time)
        if row.ragged or ts is None:
            quarantined += 1
            reject_lines.append(line)
            continue
        if case.layout == "wide":
            if ts in seen:
                quarantined += 1
                duplicates += 1
                reject_lines.append(line)
                continue
            seen.add(ts)
            loaded += 1
            for j, (kind, _, value) in enumerate(row.cells):
                if not case.names[j] and kind != "missing":
                    cells_bad += 1          # a column without a header name has no counter
                    reject_lines.append(line)
                elif kind == "num":
                    groups.setdefault((j,), []).append((ts, value))
                elif kind == "bad":
                    cells_bad += 1
                    reject_lines.append(line)
            continue
        kind, _, value = row.cells[0]
        ident = (row.host, row.metric)
        if not row.metric or kind != "num":
            quarantined += 1
            reject_lines.append(line)
        elif (ident, ts) in seen:
            quarantined += 1
            duplicates += 1
            reject_lines.append(line)
        else:
            seen.add((ident, ts))
            loaded += 1
            groups.setdefault(ident, []).append((ts, value))
    return Expected(rows, loaded, quarantined, cells_bad, duplicates,
                    sorted(sorted(g) for g in groups.values()), sorted(reject_lines))


def loaded_groups(home: Path, ingest_id: str) -> tuple[list[list[tuple[int, float]]], list[int]]:
    """The values this ingest wrote, grouped by counter, read straight from its Parquet files."""
    con = duckdb.connect(str(home / CATALOG), read_only=True)
    try:
        files = [r[0] for r in con.execute("SELECT relpath FROM ingest_files WHERE ingest_id = ?", [ingest_id]).fetchall()]
        qfile = con.execute("SELECT quarantine_file FROM ingests WHERE ingest_id = ?", [ingest_id]).fetchone()[0]
    finally:
        con.close()
    groups: dict[int, list[tuple[int, float]]] = {}
    for rel in files:
        assert re.fullmatch(rf"points/source=[a-z0-9-]+/date=\d{{4}}-\d\d-\d\d/{ingest_id}-\d{{5}}\.parquet", rel), rel
        table = pq.read_table(home / rel)
        ts = table.column("ts").cast("int64").to_pylist()
        for cid, t, v in zip(table.column("counter_id").to_pylist(), ts, table.column("value").to_pylist()):
            groups.setdefault(cid, []).append((t, v))
    lines = sorted(pq.read_table(home / qfile).column("line").to_pylist()) if qfile else []
    return sorted(sorted(g) for g in groups.values()), lines


@pytest.fixture(scope="module")
def fuzz_home(tmp_path_factory: pytest.TempPathFactory) -> Path:
    home = tmp_path_factory.mktemp("fuzz") / "wh"
    init_home(home, zone=ZONE)
    return home


def _time_format_clear(case: Case) -> bool:
    """The documented detection rule: more than half of the (non-empty) time cells must parse."""
    cells = [r.time.strip() for r in case.rows if r.text and r.time.strip()]
    return not cells or 2 * sum(map(_parses, cells)) > len(cells)


def _parses(text: str) -> bool:
    for fmt in ("%Y-%m-%dT%H:%M:%SZ", "%Y-%m-%d %H:%M:%S"):
        try:
            datetime.strptime(text, fmt)
            return True
        except ValueError:
            pass
    return False


@dataclass
class Outcome:
    status: str
    message: str = ""
    counts: tuple[int, ...] = ()
    groups: list[list[tuple[int, float]]] = field(default_factory=list)
    reject_lines: list[int] = field(default_factory=list)


def forced(case: Case) -> dict[str, str]:
    """Options a user would give: a decimal comma is detected only from cells like 12,5, and a
    header name holding another delimiter's character makes the delimiter a guess (docs/layouts.md)."""
    out = {"decimal": ","} if case.decimal == "," else {}
    if any(c in name for name in case.names for c in ",;|\t" if c != case.delimiter):
        out["delimiter"] = case.delimiter
    return out


def via_reader(path: Path, case: Case) -> Outcome:
    """Detect and read in-process, as the ingest does, without the catalog and the Parquet writer."""
    try:
        layout = detect(path, **forced(case))
        reader = FileReader(path, layout, zone=ZONE, host="fz")
        groups: dict[object, list[tuple[int, float]]] = {}
        for batch in reader.batches():
            if isinstance(batch, WideBatch):
                for j, column in enumerate(batch.columns):
                    groups.setdefault(j, []).extend(
                        (int(t), float(v)) for t, v in zip(batch.ts, column) if not math.isnan(v))
            else:
                for i, t, v in zip(batch.idx, batch.ts, batch.value):
                    groups.setdefault(batch.names[i], []).append((int(t), float(v)))
        rejects = reader.rejects()
    except BadInputError as exc:
        return Outcome("failed", str(exc))
    c = reader.counts
    dups = sum(r.reason.startswith("duplicate") for r in rejects)
    return Outcome("loaded", "", (c.rows_read, c.rows_loaded, c.rows_quarantined, c.cells_quarantined, dups),
                   sorted(sorted(g) for g in groups.values() if g), sorted(r.line for r in rejects))


def via_ingest(path: Path, case: Case, home: Path) -> Outcome:
    """The whole ingest, in-process: catalog, Parquet files, quarantine file."""
    (r,) = ingest_files(home, [path], IngestOptions(host="fz", replace=True, **forced(case)))
    if r.status != "loaded":
        return Outcome(r.status, r.message)
    assert r.rows_read == r.rows_loaded + r.rows_quarantined
    groups, lines = loaded_groups(home, r.ingest_id)
    assert r.values_loaded == sum(map(len, groups))
    return Outcome("loaded", "", (r.rows_read, r.rows_loaded, r.rows_quarantined, r.cells_quarantined, r.duplicates),
                   groups, lines)


def check_case(case: Case, folder: Path, home: Path | None = None) -> None:
    case = _normalise(case)
    path = folder / "case.csv"
    write_case(case, path)
    got = via_reader(path, case) if home is None else via_ingest(path, case, home)
    if case.layout == "wide" and not any(case.names):
        assert got.status == "failed" and "no counter columns in header" in got.message
        return
    if not _time_format_clear(case):
        # Detection takes the time format most cells parse only when that is most of them.
        assert got.status == "failed" and "\n" not in got.message
        assert got.message.startswith(f"{path}:") and "cannot tell the time format" in got.message
        return
    assert got.status == "loaded", got.message
    want = expected(case)
    assert got.counts[0] == got.counts[1] + got.counts[2]       # rows_read = loaded + quarantined
    assert got.counts == (want.rows_read, want.rows_loaded, want.rows_quarantined, want.cells_quarantined,
                          want.duplicates)
    assert got.groups == want.groups
    assert got.reject_lines == want.reject_lines


_BOTH_HOURS = Case("wide", ",", ".", "utf-8", False, ["a (ms)"], [
    Row("2026-10-25 02:30:00", [("num", "1", 1.0)]), Row("2026-10-25 03:30:00", [("num", "2", 2.0)]),
    Row("2026-03-29 02:30:00", [("num", "3", 3.0)])])
# Found by this test: a column whose header had no name was dropped with whatever it held, and one
# NUL byte anywhere made the whole file "binary".
_UNNAMED_COLUMN = Case("wide", ",", ".", "utf-8", False, ["counter0 (ms)", "counter1 (ms)", ""], [
    Row("2026-03-02T23:50:00Z", [("num", "1.000", 1.0), ("missing", "", None), ("num", "2.000", 2.0)]),
    Row("2026-03-02T23:50:15Z", [("num", "3.000", 3.0), ("num", "4.000", 4.0), ("bad", "n/a", None)]),
    Row("2026-03-02T23:50:30Z", [("missing", "", None), ("num", "5.000", 5.0), ("missing", "", None)])])
_NUL_CELL = Case("wide", ",", ".", "utf-8", False, ["counter0 (ms)"], [
    Row("2026-03-02T23:50:00Z", [("bad", "1\x002", None)]), Row("2026-03-02T23:50:15Z", [("num", "7", 7.0)]),
    Row("2026-03-02T23:50:30Z", [("bad", "\x00", None)])])
# Found by this test: a line of only delimiters ("\t\t") is a (ragged) row to the parser, but the
# line numbering skipped it as blank, so its reject got line 0.
_DELIMITERS_ONLY = Case("long", "\t", ".", "utf-8", False, ["value"], [
    Row("2026-03-02T23:50:00Z", [("missing", "", None)]),
    Row("2026-03-02T23:50:15Z", [("num", "1.5", 1.5)], ragged=-1),
    Row("", [("num", "0.000", 0.0)], ragged=-1, metric="", host=""),
    Row("2026-03-02T23:50:45Z", [("num", "2.5", 2.5)]),
    Row("2026-03-02T23:51:00Z", [("missing", "", None)])], blank_lines=True)
FUZZ = settings(deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                       HealthCheck.function_scoped_fixture])


@settings(FUZZ, max_examples=CASES)
@given(case=cases())
@example(case=_BOTH_HOURS)
@example(case=_UNNAMED_COLUMN)
@example(case=_NUL_CELL)
@example(case=_DELIMITERS_ONLY)
def test_fuzzed_files_read_exactly_their_parsable_cells(case: Case, tmp_path: Path) -> None:
    check_case(case, tmp_path)


@settings(FUZZ, max_examples=INGEST_CASES)
@given(case=cases())
@example(case=_UNNAMED_COLUMN)
@example(case=_NUL_CELL)
def test_fuzzed_files_ingest_end_to_end(case: Case, fuzz_home: Path, tmp_path: Path) -> None:
    check_case(case, tmp_path, fuzz_home)
