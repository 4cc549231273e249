"""Work out how a CSV export is laid out from its first bytes (see docs/layouts.md).

Detection reads one sample from the start of the file and decides, in this order:

1. encoding: byte-order mark, else UTF-8 if the sample decodes, else cp1252;
2. header line: blank lines are skipped; lines starting with ``#`` are preamble (comments)
   unless they are an activity header (``#`` + hostname and timestamp columns); one leading
   ``sep=X`` line is a delimiter hint and is skipped too. The first other line is the header;
3. delimiter: the candidate (``,`` ``;`` tab ``|``) that gives the header at least two cells
   and the largest share of sample rows with the header's cell count (ties: more cells, then
   the order above). A ``#`` row later in the sample with 2+ cells starts a new section and
   becomes the reference count (activity files hold several sections);
4. kind: ``activity`` > ``counter-paths`` > ``long`` > ``wide``, as in the spec;
5. column roles by header name, the time column by name or, failing that, by content;
6. decimal comma: only with ``;``, when value cells like ``12,5`` outnumber cells like ``12.5``;
7. time format: ``timeparse.guess_time_format`` on the time cells of the sample.

Any of delimiter, decimal, layout kind and time format may be forced by the caller.
"""
from __future__ import annotations

import codecs
import csv
import dataclasses
import io
import os
import re
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

from warehouse.errors import BadInputError
from warehouse.ingest.model import Layout
from warehouse.ingest.names import parse_counter_path
from warehouse.ingest.timeparse import guess_time_format, parse_times

KINDS: tuple[str, ...] = ("wide", "counter-paths", "long", "activity")
TIME_FORMATS: tuple[str, ...] = ("iso", "mdy", "dmy", "ymd-utc", "epoch_s", "epoch_ms")
DELIMITERS: tuple[str, ...] = (",", ";", "\t", "|")

_MAX_ROWS = 1000          # sample rows parsed per delimiter; enough to see consistency
_MAX_TIME_SAMPLES = 200   # time cells handed to the format guesser
_MAX_BODY_LINES = 2000    # lines after the header that detection looks at; more only costs time
_BINARY_SHARE = 0.10      # control/undecodable characters above this share mean "not text"

_LINE_BREAK = re.compile(r"\r\n|\r|\n")
_SEP_HINT = re.compile(r"^\s*sep=(.)\s*$", re.I)
_DECIMAL_COMMA = re.compile(r"^-?\d+,\d+$")
_DECIMAL_POINT = re.compile(r"^-?\d+\.\d+$")
_NUMBER = re.compile(r"^[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?$")
_NORM_DROP = re.compile(r"[\s_\-.]+")
_NORM_SUFFIX = re.compile(r"\s*[\(\[][^()\[\]]*[\)\]]\s*$")
# Control characters other than tab/newline/CR/VT/FF, DEL, and undecodable bytes.
_ODD_CHARS = re.compile(r"[\x00-\x08\x0e-\x1f\x7f\ufffd]")

# Plausible epoch range (2000-01-01 .. 2100-01-01) for spotting a time column by its content:
# without it any column of integers would pass as epoch seconds.
_EPOCH_S_RANGE = (946_684_800, 4_102_444_800)


def _names(*words: str) -> frozenset[str]:
    return frozenset(_norm(w) for w in words)


def _norm(cell: str) -> str:
    """Header text compared by role: lower case, no unit suffix, no spaces/_/-/."""
    return _NORM_DROP.sub("", _NORM_SUFFIX.sub("", cell.strip()).lower())


_ROLE_NAMES: dict[str, frozenset[str]] = {
    "time": _names("time", "timestamp", "ts", "datetime", "date time", "date", "zeit",
                   "zeitstempel", "datum", "time stamp", "sample time", "epoch",
                   "timestamp utc", "time utc", "utc time", "local time"),
    "metric": _names("metric", "counter", "name", "measure", "kpi"),
    "value": _names("value", "val", "reading", "wert"),
    "host": _names("host", "hostname", "server", "device", "node", "machine"),
    "instance": _names("instance", "inst", "object_instance"),
    "object": _names("object", "category"),
    "unit": _names("unit", "units"),
    "interval": _names("interval"),
}


def find_column(columns: Sequence[str], role: str) -> int | None:
    """Index of the first column whose header names `role` (a key of the role table), or None."""
    names = _ROLE_NAMES[role]
    return next((i for i, c in enumerate(columns) if _norm(c) in names), None)


# --------------------------------------------------------------------------- encoding & text


def sniff_encoding(head: bytes) -> str:
    """Python codec name for the sample: BOM first, then UTF-8 if it decodes, else cp1252."""
    if head.startswith(codecs.BOM_UTF8):
        return "utf-8-sig"
    if head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return "utf-16"
    try:
        # final=False: a multi-byte character cut at the end of the sample is not an error.
        codecs.getincrementaldecoder("utf-8")().decode(head, final=False)
    except UnicodeDecodeError:
        return "cp1252"
    return "utf-8"


def _read_head(path: str, sample_bytes: int) -> bytes:
    try:
        with open(path, "rb") as fh:
            return fh.read(sample_bytes)
    except OSError as exc:
        raise BadInputError(f"cannot read: {exc.strerror or exc}", path=path) from exc


def _decode(head: bytes, encoding: str, truncated: bool) -> str:
    decoder = codecs.getincrementaldecoder(encoding)(errors="replace")
    return decoder.decode(head, final=not truncated)


def _looks_binary(head: bytes, encoding: str, text: str) -> bool:
    # A stray NUL in one cell is damage to quarantine, not a reason to refuse the file: NULs count
    # with the other control characters towards the share.
    if not text:
        return False
    return len(_ODD_CHARS.findall(text)) / len(text) > _BINARY_SHARE


# --------------------------------------------------------------------------- header & rows


@dataclass(frozen=True)
class _Header:
    index: int              # 0-based index into the sample lines
    text: str               # the header line as read (may start with '#')
    hashed: bool
    sep_hint: str | None


def _split(text: str, delimiter: str) -> list[str]:
    try:
        return next(csv.reader([text], delimiter=delimiter, quotechar='"', strict=False), [])
    except csv.Error:
        return [text]


def _clean(cells: Sequence[str], hashed: bool) -> tuple[str, ...]:
    out = [c.strip() for c in cells]
    if hashed and out:
        out[0] = out[0].lstrip("#").strip()
    return tuple(out)


def _is_activity_header(line: str, delimiters: Sequence[str]) -> bool:
    for delimiter in delimiters:
        cells = _clean(_split(line, delimiter), hashed=True)
        if find_column(cells, "host") is not None and find_column(cells, "time") is not None:
            return True
    return False


def _find_header(lines: Sequence[str], delimiters: Sequence[str], path: str,
                 truncated: bool) -> _Header:
    sep_hint: str | None = None
    seen_text = False
    for index, line in enumerate(lines):
        if not line.strip():
            continue
        hint = _SEP_HINT.match(line)
        if hint and not seen_text:
            sep_hint = hint.group(1)
            seen_text = True
            continue
        seen_text = True
        stripped = line.lstrip()
        if stripped.startswith("#"):
            if _is_activity_header(stripped, (sep_hint,) if sep_hint else delimiters):
                return _Header(index, stripped, True, sep_hint)
            continue
        return _Header(index, line, False, sep_hint)
    if truncated:
        raise BadInputError("no complete header line in the sample (header too long?)", path=path)
    raise BadInputError("no header line (only blank or comment lines)", path=path)


@dataclass(frozen=True)
class _Row:
    line: int               # 1-based line number where the row starts
    cells: list[str]


def _rows(body: Sequence[str], first_line: int, delimiter: str) -> Iterator[_Row]:
    """Non-blank CSV rows of the body (lines after the header), quotes respected."""
    reader = csv.reader(io.StringIO("\n".join(body)), delimiter=delimiter, quotechar='"',
                        strict=False)
    consumed = 0
    try:
        for cells in reader:
            start, consumed = consumed, reader.line_num
            if any(c.strip() for c in cells):
                yield _Row(first_line + start, cells)
    except csv.Error:
        return  # an over-long field or similar: the rows so far are sample enough


def _is_section(row: _Row) -> bool:
    return bool(row.cells) and row.cells[0].lstrip().startswith("#")


def _delimiter_score(header: str, body: Sequence[str], delimiter: str) -> tuple[int, float, int]:
    reference = len(_split(header, delimiter))
    if reference < 2:
        return (0, 0.0, reference)
    header_cells, matches, total = reference, 0, 0
    for n, row in enumerate(_rows(body, 0, delimiter)):
        if n >= _MAX_ROWS:
            break
        if _is_section(row):
            if len(row.cells) >= 2:
                reference = len(row.cells)
            continue
        total += 1
        matches += len(row.cells) == reference
    return (1, matches / total if total else 1.0, header_cells)


def _choose_delimiter(header: str, body: Sequence[str]) -> str:
    scored = [(_delimiter_score(header, body, d), -i, d) for i, d in enumerate(DELIMITERS)]
    return max(scored)[2]


# --------------------------------------------------------------------------- column plans


@dataclass(frozen=True)
class _Plan:
    kind: str
    time_col: int
    value_cols: tuple[int, ...]
    metric_col: int | None = None
    host_col: int | None = None
    instance_col: int | None = None
    tag_cols: tuple[int, ...] = ()
    object_col: int | None = None
    unit_col: int | None = None
    ignore_cols: tuple[int, ...] = ()
    zone_note: str | None = None


def _is_counter_paths(columns: Sequence[str]) -> bool:
    paths = [c for c in columns[1:] if c]
    return bool(paths) and all(parse_counter_path(c) for c in paths)


def _classify(columns: Sequence[str], hashed: bool) -> str:
    if hashed and find_column(columns, "host") is not None \
            and find_column(columns, "time") is not None:
        return "activity"
    if _is_counter_paths(columns):
        return "counter-paths"
    if find_column(columns, "metric") is not None and find_column(columns, "value") is not None:
        return "long"
    return "wide"


def _column_cells(rows: Sequence[_Row], col: int) -> list[str]:
    cells = (r.cells[col].strip() for r in rows if col < len(r.cells) and not _is_section(r))
    return [c for c in cells if c][:_MAX_TIME_SAMPLES]


def _plausible_epoch(fmt: str, samples: Sequence[str]) -> bool:
    scale = 1000 if fmt == "epoch_ms" else 1
    low, high = _EPOCH_S_RANGE
    try:
        return all(low * scale <= float(s) <= high * scale for s in samples)
    except ValueError:
        return False


def _time_col_by_content(columns: Sequence[str], rows: Sequence[_Row],
                         skip: set[int]) -> int | None:
    for col in range(len(columns)):
        samples = [] if col in skip else _column_cells(rows, col)
        if not samples:
            continue
        fmt = guess_time_format(samples)
        if fmt and (not fmt.startswith("epoch") or _plausible_epoch(fmt, samples)):
            return col
    return None


def _empty_cols(columns: Sequence[str]) -> tuple[int, ...]:
    # A header cell with no name (typically from a trailing delimiter) carries no counter.
    return tuple(i for i, c in enumerate(columns) if not c)


def _no_time(columns: Sequence[str], path: str, line: int) -> BadInputError:
    listed = ", ".join(columns)
    return BadInputError(f"no timestamp column in header (columns: {listed})", path=path, line=line)


def _require_time(columns: Sequence[str], rows: Sequence[_Row], skip: set[int],
                  path: str, line: int) -> int:
    col = find_column(columns, "time")
    if col is None or col in skip:
        col = _time_col_by_content(columns, rows, skip)
    if col is None:
        raise _no_time(columns, path, line)
    return col


def _rest(columns: Sequence[str], taken: set[int]) -> tuple[int, ...]:
    return tuple(i for i in range(len(columns)) if i not in taken)


def _plan_wide(columns: Sequence[str], rows: Sequence[_Row], path: str, line: int) -> _Plan:
    ignore = _empty_cols(columns)
    time_col = _require_time(columns, rows, set(ignore), path, line)
    values = _rest(columns, {time_col, *ignore})
    if not values:
        raise BadInputError(f"no counter columns in header (columns: {', '.join(columns)})",
                            path=path, line=line)
    return _Plan("wide", time_col, values, ignore_cols=ignore)


def _plan_counter_paths(columns: Sequence[str], path: str, line: int) -> _Plan:
    for i, cell in enumerate(columns[1:], start=2):
        if cell and parse_counter_path(cell) is None:
            raise BadInputError(f"header cell {i} is not a counter path: {cell!r}",
                                path=path, line=line)
    ignore = tuple(i for i in _empty_cols(columns) if i > 0)
    values = _rest(columns, {0, *ignore})
    if not values:
        raise BadInputError("no counter paths in header", path=path, line=line)
    # The first cell is the logger's note (format, zone name, offset); kept verbatim.
    return _Plan("counter-paths", 0, values, ignore_cols=ignore, zone_note=columns[0] or None)


def _plan_long(columns: Sequence[str], rows: Sequence[_Row], path: str, line: int) -> _Plan:
    metric, value = find_column(columns, "metric"), find_column(columns, "value")
    if metric is None or value is None:
        raise BadInputError("long layout needs a metric and a value column "
                            f"(columns: {', '.join(columns)})", path=path, line=line)
    host, instance = find_column(columns, "host"), find_column(columns, "instance")
    obj, unit = find_column(columns, "object"), find_column(columns, "unit")
    ignore = _empty_cols(columns)
    named = {c for c in (metric, value, host, instance, obj, unit) if c is not None}
    time_col = _require_time(columns, rows, named | set(ignore), path, line)
    # Tags are listed in the order they join the instance: by column name.
    tags = tuple(sorted(_rest(columns, named | {time_col, *ignore}), key=lambda i: columns[i]))
    return _Plan("long", time_col, (value,), metric_col=metric, host_col=host,
                 instance_col=instance, tag_cols=tags, object_col=obj, unit_col=unit,
                 ignore_cols=ignore)


def _is_instance_column(header: str, cells: Sequence[str]) -> bool:
    """An activity column that names instances (CPU, IFACE, DEV...) rather than a measure."""
    if not header or any(ch in header for ch in "%/"):
        return False
    if header.isupper():
        return True
    return any(not _NUMBER.match(c) for c in cells)


def _section_rows(rows: Sequence[_Row]) -> list[_Row]:
    """The rows of the first activity section (up to the next '#' header)."""
    out: list[_Row] = []
    for row in rows:
        if _is_section(row):
            break
        out.append(row)
    return out


def _activity_instance(columns: Sequence[str], rows: Sequence[_Row], col: int,
                       taken: set[int]) -> int | None:
    """`col` (the column after the timestamp) if it names instances, else None."""
    if col >= len(columns) or col in taken:
        return None
    return col if _is_instance_column(columns[col], _column_cells(rows, col)) else None


def _plan_activity(columns: Sequence[str], rows: Sequence[_Row], path: str, line: int) -> _Plan:
    host = find_column(columns, "host")
    interval = find_column(columns, "interval")
    time_col = find_column(columns, "time")
    if time_col is None:
        raise _no_time(columns, path, line)
    ignore = set(_empty_cols(columns)) | ({interval} if interval is not None else set())
    taken = {time_col, *ignore} | ({host} if host is not None else set())
    instance = _activity_instance(columns, rows, time_col + 1, taken)
    values = _rest(columns, taken | ({instance} if instance is not None else set()))
    if not values:
        raise BadInputError(f"no measure columns in header (columns: {', '.join(columns)})",
                            path=path, line=line)
    return _Plan("activity", time_col, values, host_col=host, instance_col=instance,
                 ignore_cols=tuple(sorted(ignore)))


def _plan(kind: str, columns: Sequence[str], rows: Sequence[_Row], path: str, line: int) -> _Plan:
    if kind == "counter-paths":
        return _plan_counter_paths(columns, path, line)
    if kind == "long":
        return _plan_long(columns, rows, path, line)
    if kind == "activity":
        return _plan_activity(columns, rows, path, line)
    return _plan_wide(columns, rows, path, line)


# --------------------------------------------------------------------------- decimal & time


def _detect_decimal(delimiter: str, rows: Sequence[_Row], value_cols: Sequence[int]) -> str:
    if delimiter != ";":
        return "."
    comma = point = 0
    for row in rows[:_MAX_ROWS]:
        for col in value_cols:
            if col < len(row.cells) and not _is_section(row):
                cell = row.cells[col].strip()
                comma += bool(_DECIMAL_COMMA.match(cell))
                point += bool(_DECIMAL_POINT.match(cell))
    return "," if comma > point else "."


def _majority_time_format(samples: list[str]) -> str | None:
    """A few malformed time cells must not hide the format: take the one most cells parse,
    if that is most of them; the rest are quarantined at read time."""
    best, best_ok = None, 0
    for fmt in TIME_FORMATS:
        _, reason = parse_times(samples, fmt, None)
        ok = int((reason == 0).sum())
        if ok > best_ok:
            best, best_ok = fmt, ok
    return best if best_ok * 2 > len(samples) else None


_KIND_DEFAULT_TIME = {"counter-paths": "mdy", "activity": "ymd-utc"}


def _detect_time_format(kind: str, samples: list[str], columns: Sequence[str], time_col: int,
                        path: str, line: int) -> str:
    if not samples:
        # Header only: nothing to look at, so take what the layout usually carries.
        return _KIND_DEFAULT_TIME.get(kind, "iso")
    fmt = guess_time_format(samples) or _majority_time_format(samples)
    if fmt is None:
        raise BadInputError(f"cannot tell the time format of column {columns[time_col]!r} "
                            f"(e.g. {samples[0]!r}); force one with a time format option",
                            path=path, line=line)
    return fmt


# --------------------------------------------------------------------------- forced options


def _check_kind(layout: str | None, path: str) -> str | None:
    if layout is not None and layout not in KINDS:
        raise BadInputError(f"unknown layout {layout!r} (expected one of: {', '.join(KINDS)})",
                            path=path)
    return layout


def _check_delimiter(delimiter: str | None, path: str) -> str | None:
    if delimiter is None:
        return None
    value = {"tab": "\t", "\\t": "\t"}.get(delimiter.lower(), delimiter)
    if len(value) != 1 or value in '"\r\n#' or value.isalnum():
        raise BadInputError(f"invalid delimiter {delimiter!r} (one character such as , ; | "
                            "or 'tab')", path=path)
    return value


def _check_decimal(decimal: str | None, delimiter: str, path: str) -> str | None:
    if decimal is None:
        return None
    if decimal not in (".", ","):
        raise BadInputError(f"invalid decimal mark {decimal!r} (expected '.' or ',')", path=path)
    if decimal == delimiter:
        raise BadInputError(f"decimal mark {decimal!r} cannot also be the delimiter", path=path)
    return decimal


def _check_time_format(time_format: str | None, path: str) -> str | None:
    if time_format is not None and time_format not in TIME_FORMATS and "%" not in time_format:
        raise BadInputError(f"invalid time format {time_format!r} (expected one of "
                            f"{', '.join(TIME_FORMATS)} or a strptime pattern with '%')",
                            path=path)
    return time_format


# --------------------------------------------------------------------------- entry points


def _sample_lines(path: str, sample_bytes: int) -> tuple[str, list[str], bool]:
    """(encoding, physical lines without terminators, whether the sample was cut short)."""
    head = _read_head(path, sample_bytes)
    if not head:
        raise BadInputError("empty file", path=path)
    truncated = len(head) >= sample_bytes
    encoding = sniff_encoding(head)
    text = _decode(head, encoding, truncated)
    if _looks_binary(head, encoding, text):
        raise BadInputError("binary file, not a CSV export", path=path)
    lines = _LINE_BREAK.split(text)
    if truncated:
        lines = lines[:-1]  # the last line may be cut mid-way
    if not any(line.strip() for line in lines) and not truncated:
        raise BadInputError("empty file", path=path)
    return encoding, lines, truncated


def detect(path: str | os.PathLike[str], *, layout: str | None = None,
           delimiter: str | None = None, decimal: str | None = None,
           time_format: str | None = None, sample_bytes: int = 1 << 20) -> Layout:
    """The Layout of the CSV export at `path`, from its first `sample_bytes` bytes.

    Forced options win over detection; invalid values and unusable files raise BadInputError.
    """
    where = os.fspath(path)
    forced_kind = _check_kind(layout, where)
    forced_delimiter = _check_delimiter(delimiter, where)
    forced_time = _check_time_format(time_format, where)
    encoding, lines, truncated = _sample_lines(where, sample_bytes)

    candidates = (forced_delimiter,) if forced_delimiter else DELIMITERS
    header = _find_header(lines, candidates, where, truncated)
    body = lines[header.index + 1:header.index + 1 + _MAX_BODY_LINES]
    chosen = forced_delimiter or header.sep_hint or _choose_delimiter(header.text, body)
    header_line = header.index + 1
    columns = _clean(_split(header.text, chosen), header.hashed)
    rows = list(_rows(body, header_line + 1, chosen))

    kind = forced_kind or _classify(columns, header.hashed)
    if kind == "activity":
        rows = _section_rows(rows)  # later sections may have other columns
    plan = _plan(kind, columns, rows, where, header_line)
    mark = _check_decimal(decimal, chosen, where) or _detect_decimal(chosen, rows, plan.value_cols)
    samples = _column_cells(rows, plan.time_col)
    fmt = forced_time or _detect_time_format(kind, samples, columns, plan.time_col, where,
                                             rows[0].line if rows else header_line)
    return Layout(kind=kind, encoding=encoding, delimiter=chosen, decimal=mark,
                  header_line=header_line, columns=columns, time_format=fmt,
                  **{f.name: getattr(plan, f.name) for f in dataclasses.fields(plan)
                     if f.name != "kind"})

