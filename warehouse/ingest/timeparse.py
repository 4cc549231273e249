"""Timestamp cells -> int64 microseconds since the epoch (UTC), vectorised.

Long-layout files carry tens of millions of timestamps, so no stage here loops over rows in
Python. Each named format works in three steps:

1. a shape check with one regular expression per format (``pyarrow.compute``, a DFA match, no
   captures - capturing groups are several times slower than a plain match);
2. field extraction by reading digit bytes straight out of the Arrow data buffer with numpy,
   at fixed positions where the shape fixes them and with short digit runs where it does not;
3. calendar arithmetic in numpy, then one ``tz_localize`` call for naive local times so that
   DST gaps and overlaps are reported rather than shifted.

A row that fails any step gets a reason code instead of raising.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property, lru_cache
from typing import Union
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from warehouse.errors import BadInputError

REASON_UNPARSABLE = "unparsable timestamp"
REASON_AMBIGUOUS = "ambiguous local time (DST fall-back)"
REASON_NONEXISTENT = "non-existent local time (DST spring-forward gap)"
REASONS: tuple[str, ...] = ("", REASON_UNPARSABLE, REASON_AMBIGUOUS, REASON_NONEXISTENT)

OK = 0
UNPARSABLE = 1
AMBIGUOUS = 2
NONEXISTENT = 3

FORMATS = ("iso", "mdy", "dmy", "ymd-utc", "epoch_s", "epoch_ms")

TimeValues = Union[pa.Array, pa.ChunkedArray, list[str | None]]

_US_PER_S = 1_000_000
_POW10 = 10 ** np.arange(19, dtype=np.int64)
_TRIM_CHARS = " \t\r\n\v\f\"'"
_IS_TRIM = np.zeros(256, dtype=bool)
_IS_TRIM[[ord(c) for c in _TRIM_CHARS]] = True
# Enough slack after the last row that every fixed-position read of a row that failed the
# shape check (start 0, length 0) or a run read past a row's end stays inside the buffer.
_PAD = 64

_FRACTION = r"(?:[.,]\d{1,9})?"
_CLOCK_24 = r"\d{2}:\d{2}(?::\d{2}" + _FRACTION + r")?"
_CLOCK_FREE = r"\d{1,2}:\d{2}(?::\d{2}" + _FRACTION + r")?(?: ?[AaPp][Mm])?"
_SHAPES: dict[str, str] = {
    "iso": r"^\d{4}-\d{2}-\d{2}[T ]" + _CLOCK_24 + r"(?:[Zz]|[+-]\d{2}(?::?\d{2})?)?$",
    "mdy": r"^\d{1,2}/\d{1,2}/\d{4}[ T]" + _CLOCK_FREE + "$",
    # No backreferences in RE2, so the three separators are spelled out to keep them consistent.
    "dmy": r"^(?:\d{1,2}\.\d{1,2}\.\d{4}|\d{1,2}/\d{1,2}/\d{4}|\d{1,2}-\d{1,2}-\d{4})[ T]"
    + _CLOCK_FREE + "$",
    "ymd-utc": r"^\d{4}-\d{2}-\d{2} \d{2}:\d{2}:\d{2}(?:\.\d{1,9})? UTC$",
    # Digit limits keep value * 10**6 (or * 10**3) inside int64.
    "epoch_s": r"^-?\d{1,12}" + _FRACTION + "$",
    "epoch_ms": r"^-?\d{1,15}" + _FRACTION + "$",
}
# Guessing is stricter than parsing: a short number is more likely a counter than a time.
_GUESS_SHAPES: dict[str, str] = {
    "epoch_s": r"^\d{9,11}(?:\.\d{1,9})?$",
    "epoch_ms": r"^\d{12,14}$",
}
_UTC_NAMES = frozenset(
    {"utc", "etc/utc", "uct", "etc/uct", "zulu", "etc/zulu", "universal", "etc/universal",
     "gmt", "etc/gmt", "gmt0", "etc/gmt0", "gmt+0", "etc/gmt+0", "gmt-0", "etc/gmt-0", "z"}
)


# --------------------------------------------------------------------------- byte access

Pos = Union[int, np.ndarray]


class _Text:
    """The bytes of a string array, addressable per row with vectorised reads.

    When every row has the same byte length the rows form an (n, width) grid over the Arrow
    buffer itself, and a read at one position for all rows is a strided column view instead
    of a gather - several times cheaper. Readers keep positions scalar (see `_settle`) to stay
    on that path; per-row positions fall back to gathers from a zero-padded copy.
    """

    def __init__(self, data: np.ndarray, start: np.ndarray, length: np.ndarray) -> None:
        self.data = data      # uint8: the rows' bytes back to back
        self.start = start    # int64: where each row starts in data
        self.length = length  # int64: byte length of each row; 0 hides a row from reads
        n = len(start)
        same = n > 0 and bool(np.all(length == length[0])) and int(length[0]) > 0
        self.width: int | None = int(length[0]) if same else None
        self.grid = data[: n * self.width].reshape(n, self.width) if same else None

    def __len__(self) -> int:
        return len(self.start)

    @cached_property
    def padded(self) -> np.ndarray:
        # Slack after the last row keeps every read a row may do past its own end in bounds.
        out = np.zeros(len(self.data) + _PAD, dtype=np.uint8)
        out[: len(self.data)] = self.data
        return out

    @property
    def end(self) -> Pos:
        """Each row's length, as one number when all rows share it."""
        return self.width if self.width is not None else self.length

    def raw(self, pos: Pos) -> np.ndarray:
        """Byte at pos of every row, for positions the shape check guarantees exist."""
        if self.grid is not None and isinstance(pos, int) and 0 <= pos < self.grid.shape[1]:
            return self.grid[:, pos]
        return self.padded[self.start + pos]

    def byte(self, pos: Pos) -> np.ndarray:
        """Byte at pos of every row, 0 where pos is outside the row."""
        if self.grid is not None and isinstance(pos, int):
            if 0 <= pos < self.grid.shape[1]:
                return self.grid[:, pos]
            return np.zeros(len(self), dtype=np.uint8)
        inside = (pos >= 0) & (pos < self.length)
        return np.where(inside, self.padded[self.start + pos], 0).astype(np.uint8, copy=False)

    def restrict(self, keep: np.ndarray) -> _Text:
        """Hide the rows not kept, so that later reads of them see zero bytes.

        A grid stays whole: its rows are all in bounds, and callers mask results by `ok`.
        """
        if self.grid is not None or bool(keep.all()):
            return self
        return _Text(self.data, np.where(keep, self.start, 0), np.where(keep, self.length, 0))


def _text_of(arr: pa.Array) -> _Text:
    offset_type = np.dtype(np.int64 if pa.types.is_large_string(arr.type) else np.int32)
    buffers = arr.buffers()
    n = len(arr)
    offsets = np.frombuffer(buffers[1], dtype=offset_type, count=n + 1,
                            offset=arr.offset * offset_type.itemsize).astype(np.int64)
    lo, hi = int(offsets[0]), int(offsets[-1])
    if hi > lo:
        data = np.frombuffer(buffers[2], dtype=np.uint8, count=hi - lo, offset=lo)
    else:
        data = np.zeros(0, dtype=np.uint8)
    length = np.diff(offsets)
    if arr.null_count:
        # A null slot may still own bytes; it must not look like text.
        length[arr.is_null().to_numpy(zero_copy_only=False)] = 0
    return _Text(data, offsets[:-1] - lo, length)


def _needs_trim(text: _Text) -> bool:
    last = text.byte(np.maximum(text.length - 1, 0)) if text.width is None else text.byte(
        text.width - 1)
    return bool(np.any((text.length > 0) & (_IS_TRIM[text.byte(0)] | _IS_TRIM[last])))


def _prepare(arr: pa.Array) -> tuple[pa.Array, _Text]:
    """The array with padding quotes/whitespace removed, and its bytes."""
    text = _text_of(arr)
    if _needs_trim(text):
        arr = pc.ascii_trim(arr, _TRIM_CHARS)
        text = _text_of(arr)
    return arr, text


def _settle(pos: Pos, ok: np.ndarray) -> Pos:
    """pos as one number when every ok row agrees on it (rows not ok may read anywhere)."""
    if isinstance(pos, int) or not ok.any():
        return pos if isinstance(pos, int) else 0
    first = int(pos[int(np.argmax(ok))])
    return first if bool(np.all((pos == first) | ~ok)) else pos


def _shape_ok(arr: pa.Array, pattern: str) -> np.ndarray:
    matched = pc.match_substring_regex(arr, pattern)
    return pc.fill_null(matched, False).to_numpy(zero_copy_only=False)


# --------------------------------------------------------------------------- field readers


def _is_digit(b: np.ndarray) -> np.ndarray:
    # uint8 wrap-around sends every non-digit byte to 10 or more: two passes instead of three.
    return (b - np.uint8(48)) < 10


def _is_any(b: np.ndarray, chars: str) -> np.ndarray:
    hit = b == ord(chars[0])
    for c in chars[1:]:
        hit |= b == ord(c)
    return hit


def _number(text: _Text, pos: Pos, width: int) -> np.ndarray:
    """A fixed-width run of digits the shape check guarantees, as int32."""
    value = np.multiply(text.raw(pos), 10 ** (width - 1), dtype=np.int32)
    for k in range(1, width):
        value += np.multiply(text.raw(pos + k), 10 ** (width - 1 - k), dtype=np.int32)
    value -= 48 * int("1" * width)
    return value


def _run(text: _Text, pos: Pos, most: int) -> tuple[np.ndarray, np.ndarray]:
    """Value and digit count of the run of at most `most` digits starting at pos."""
    kind = np.int64 if most > 9 else np.int32
    value = np.zeros(len(text), dtype=kind)
    count = np.zeros(len(text), dtype=np.int32)
    live = np.ones(len(text), dtype=bool)
    for k in range(most):
        b = text.byte(pos + k)
        live &= _is_digit(b)
        if not live.any():
            break
        value = np.where(live, value * 10 + np.subtract(b, 48, dtype=kind), value)
        count += live
    return value, count


def _one_or_two(text: _Text, pos: Pos, ok: np.ndarray) -> tuple[np.ndarray, Pos]:
    """A one- or two-digit field at pos, and the position just after it.

    The shape check guarantees the first digit; only the second needs looking at.
    """
    two = _is_digit(text.byte(pos + 1))
    if bool(np.all(two | ~ok)):
        # Zero-padded exports are the common case: one fixed-width read, positions stay scalar.
        return _number(text, pos, 2), pos + 2
    value, width = _run(text, pos, 2)
    return value, _settle(pos + width, ok)


def _fraction(text: _Text, pos: Pos, places: int) -> np.ndarray:
    """Digits after a point at pos - 1 as a count of 10**-places units; later digits are cut."""
    units = np.zeros(len(text), dtype=np.int32)
    live = np.ones(len(text), dtype=bool)
    for k in range(places):
        b = text.byte(pos + k)
        live &= _is_digit(b)
        if not live.any():
            break
        digit = np.subtract(b, 48, dtype=np.int32)
        digit *= live
        digit *= 10 ** (places - 1 - k)
        units += digit
    return units


def _clock_tail(text: _Text, pos: Pos, ok: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Seconds and microseconds of ':SS[.fff]' at pos (both 0 where the row has none)."""
    has_seconds = text.byte(pos) == ord(":")
    second = _number(text, pos + 1, 2)
    second *= has_seconds
    has_fraction = has_seconds & _is_any(text.byte(pos + 3), ".,")
    if not (has_fraction & ok).any():
        return second, np.zeros(len(text), dtype=np.int32)
    micro = _fraction(text, pos + 4, 6)
    micro *= has_fraction
    return second, micro


def _meridiem(text: _Text, hour: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """24-hour clock hour from an optional AM/PM suffix, and whether the hour fits it."""
    has = _is_any(text.byte(text.end - 1), "Mm")
    if not has.any():
        return hour, np.ones(len(text), dtype=bool)
    pm = has & _is_any(text.byte(text.end - 2), "Pp")
    fits = ~has | ((hour >= 1) & (hour <= 12))
    return np.where(has, hour % 12 + 12 * pm, hour), fits


# --------------------------------------------------------------------------- calendar


def _calendar() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Lookup tables for four-digit years: a gather per field beats divisions per row.

    Returns days from 1970-01-01 to 1 January of each year 0..9999, a leap flag per year,
    and, indexed by leap * 13 + month, the days before that month and its length.
    """
    years = np.arange(10000)
    leap = (years % 4 == 0) & ((years % 100 != 0) | (years % 400 == 0))
    year_start = np.concatenate([[0], np.cumsum(365 + leap)[:-1]])
    year_start -= year_start[1970]
    common = [0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]
    lengths = np.array([common, common[:2] + [29] + common[3:]], dtype=np.int32)
    before = np.concatenate([np.zeros((2, 1), dtype=np.int32),
                             np.cumsum(lengths, axis=1)[:, :-1]], axis=1)
    return (year_start.astype(np.int32), leap.astype(np.int32), before.ravel(),
            lengths.ravel())


_YEAR_START, _LEAP, _MONTH_START, _MONTH_LENGTH = _calendar()


def _days(year: np.ndarray, month: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Days since 1970-01-01 of each date, and which dates exist (year 1..9999)."""
    key = np.take(_LEAP, year, mode="clip") * 13
    key += month
    days = np.take(_YEAR_START, year, mode="clip")
    days += np.take(_MONTH_START, key, mode="clip")
    days += day - 1
    exists = (year >= 1) & (month >= 1) & (month <= 12) & (day >= 1)
    exists &= day <= np.take(_MONTH_LENGTH, key, mode="clip")
    return days, exists


@dataclass(frozen=True)
class _Parsed:
    """Per-row result of reading one chunk, before any time-zone work."""

    us: np.ndarray     # int64: UTC for aware rows, wall-clock for naive rows, 0 where not ok
    ok: np.ndarray     # bool
    aware: np.ndarray  # bool: the text fixed its own instant (offset, 'Z', 'UTC' or epoch)


def _assemble(year: np.ndarray, month: np.ndarray, day: np.ndarray, hour: np.ndarray,
              minute: np.ndarray, second: np.ndarray, micro: np.ndarray,
              ok: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Wall-clock microseconds of valid calendar fields, and which rows were valid."""
    days, exists = _days(year, month, day)
    ok = ok & exists & (hour <= 23) & (minute <= 59) & (second <= 59)
    clock = hour * 3600 + minute * 60 + second
    us = days.astype(np.int64)
    us *= 86400
    us += clock
    us *= _US_PER_S
    us += micro
    us *= ok
    return us, ok


# --------------------------------------------------------------------------- formats


def _read_iso(text: _Text, ok: np.ndarray) -> _Parsed:
    year, month, day = _number(text, 0, 4), _number(text, 5, 2), _number(text, 8, 2)
    hour, minute = _number(text, 11, 2), _number(text, 14, 2)
    second, micro = _clock_tail(text, 16, ok)
    wall, ok = _assemble(year, month, day, hour, minute, second, micro, ok)
    offset_s, aware, offset_ok = _iso_offset(text, ok)
    ok &= offset_ok
    wall -= offset_s.astype(np.int64) * _US_PER_S
    wall *= ok
    return _Parsed(wall, ok, aware)


def _iso_offset(text: _Text, ok: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Offset east of UTC in seconds, whether the row had a zone suffix, and whether it fits.

    The shape check leaves only digits, '.', ',' and ':' before a zone suffix, so a sign
    6, 5 or 3 bytes from the end can only start '+HH:MM', '+HHMM' or '+HH'.
    """
    end = text.end
    zulu = _is_any(text.byte(end - 1), "Zz")
    long_form = _is_any(text.byte(end - 6), "+-")
    compact = _is_any(text.byte(end - 5), "+-")
    signed = long_form | compact | _is_any(text.byte(end - 3), "+-")
    if not (signed & ok).any():
        zeros = np.zeros(len(text), dtype=np.int64)
        return zeros, zulu, np.ones(len(text), dtype=bool)
    sign_at = _settle(np.where(long_form, end - 6, np.where(compact, end - 5, end - 3)),
                      ok & signed)
    hours = _number(text, sign_at + 1, 2)
    minutes = np.where(long_form, _number(text, sign_at + 4, 2),
                       np.where(compact, _number(text, sign_at + 3, 2), 0))
    sign = np.where(text.byte(sign_at) == ord("-"), -1, 1).astype(np.int32)
    offset_s = sign * (hours * 3600 + minutes * 60) * signed
    fits = ~signed | ((hours <= 23) & (minutes <= 59))
    return offset_s, zulu | signed, fits


def _read_numeric_date(text: _Text, ok: np.ndarray, month_first: bool) -> _Parsed:
    """'A/B/YYYY H:MM[:SS[.f]][ AM]' where A, B and H have one or two digits."""
    first, pos = _one_or_two(text, 0, ok)
    other, pos = _one_or_two(text, pos + 1, ok)
    year = _number(text, pos + 1, 4)
    hour, pos = _one_or_two(text, pos + 6, ok)
    minute = _number(text, pos + 1, 2)
    second, micro = _clock_tail(text, pos + 3, ok)
    hour, hour_fits = _meridiem(text, hour)
    month, day = (first, other) if month_first else (other, first)
    wall, ok = _assemble(year, month, day, hour, minute, second, micro, ok & hour_fits)
    return _Parsed(wall, ok, np.zeros(len(ok), dtype=bool))


def _read_mdy(text: _Text, ok: np.ndarray) -> _Parsed:
    return _read_numeric_date(text, ok, month_first=True)


def _read_dmy(text: _Text, ok: np.ndarray) -> _Parsed:
    return _read_numeric_date(text, ok, month_first=False)


def _read_ymd_utc(text: _Text, ok: np.ndarray) -> _Parsed:
    year, month, day = _number(text, 0, 4), _number(text, 5, 2), _number(text, 8, 2)
    hour, minute = _number(text, 11, 2), _number(text, 14, 2)
    second, micro = _clock_tail(text, 16, ok)
    wall, ok = _assemble(year, month, day, hour, minute, second, micro, ok)
    return _Parsed(wall, ok, np.ones(len(ok), dtype=bool))


def _read_epoch(text: _Text, ok: np.ndarray, places: int, most: int) -> _Parsed:
    """A count of 10**-places seconds, with an optional fraction of that unit."""
    negative = text.byte(0) == ord("-")
    pos = _settle(negative.astype(np.int64), ok)
    whole, width = _run(text, pos, most)
    pos = _settle(pos + width, ok)
    has_fraction = text.byte(pos) == ord(".")
    part = np.zeros(len(text), dtype=np.int64)
    if (has_fraction & ok).any():
        part = _fraction(text, pos + 1, 6 - places).astype(np.int64) * has_fraction
    us = (whole * _POW10[6 - places] + part) * np.where(negative, -1, 1)
    return _Parsed(np.where(ok, us, 0), ok, np.ones(len(ok), dtype=bool))


def _read_epoch_s(text: _Text, ok: np.ndarray) -> _Parsed:
    return _read_epoch(text, ok, places=0, most=12)


def _read_epoch_ms(text: _Text, ok: np.ndarray) -> _Parsed:
    return _read_epoch(text, ok, places=3, most=15)


_READERS = {
    "iso": _read_iso,
    "mdy": _read_mdy,
    "dmy": _read_dmy,
    "ymd-utc": _read_ymd_utc,
    "epoch_s": _read_epoch_s,
    "epoch_ms": _read_epoch_ms,
}


def _read_named(arr: pa.Array, fmt: str) -> _Parsed:
    arr, text = _prepare(arr)
    ok = _shape_ok(arr, _SHAPES[fmt])
    return _READERS[fmt](text.restrict(ok), ok)


def _read_pattern(arr: pa.Array, pattern: str) -> _Parsed:
    """A user strptime pattern; pandas does the per-row work in compiled code."""
    trimmed = pc.ascii_trim(arr, _TRIM_CHARS)
    aware = "%z" in pattern or "%Z" in pattern
    try:
        stamps = pd.to_datetime(pd.Series(trimmed.to_numpy(zero_copy_only=False), dtype=object),
                                format=pattern, errors="coerce", utc=aware)
    except (ValueError, TypeError) as exc:
        raise BadInputError(f"time pattern {pattern!r} is not usable: {exc}") from exc
    index = pd.DatetimeIndex(stamps)
    if aware:
        index = index.tz_convert("UTC").tz_localize(None)
    ok = ~np.asarray(index.isna())
    us = np.where(ok, index.as_unit("us").asi8, 0)
    return _Parsed(us, ok, np.full(len(ok), aware))


# --------------------------------------------------------------------------- time zones


@lru_cache(maxsize=64)
def _zone(name: str | None) -> ZoneInfo | None:
    """The zone for naive times; None means UTC, which needs no conversion at all."""
    if name is None or name.strip().lower() in _UTC_NAMES:
        return None
    try:
        return ZoneInfo(name.strip())
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise BadInputError(f"unknown time zone {name!r}") from exc


def _localize(wall: np.ndarray, zone: ZoneInfo) -> tuple[np.ndarray, np.ndarray]:
    """UTC microseconds of wall-clock times in zone, and a reason code per row."""
    index = pd.DatetimeIndex(wall.view("datetime64[us]"))
    utc = index.tz_localize(zone, ambiguous="NaT", nonexistent="NaT").as_unit("us")
    us = utc.asi8.copy()
    reason = np.zeros(len(wall), dtype=np.int8)
    missing = np.flatnonzero(np.asarray(utc.isna()))
    if len(missing):
        # Only gaps stay NaT once overlaps are resolved, which tells the two apart.
        resolved = index[missing].tz_localize(
            zone, ambiguous=np.ones(len(missing), dtype=bool), nonexistent="NaT")
        reason[missing] = np.where(np.asarray(resolved.isna()), NONEXISTENT, AMBIGUOUS)
        us[missing] = 0
    return us, reason


def _apply_zone(parsed: _Parsed, zone: ZoneInfo | None) -> tuple[np.ndarray, np.ndarray]:
    reason = np.where(parsed.ok, OK, UNPARSABLE).astype(np.int8)
    us = parsed.us
    naive = np.flatnonzero(parsed.ok & ~parsed.aware)
    if zone is None or len(naive) == 0:
        return us, reason
    if len(naive) == len(us):
        local_us, local_reason = _localize(us, zone)
        return np.where(local_reason == OK, local_us, 0), local_reason
    local_us, local_reason = _localize(us[naive], zone)
    us = us.copy()
    us[naive] = np.where(local_reason == OK, local_us, 0)
    reason[naive] = local_reason
    return us, reason


# --------------------------------------------------------------------------- public API


def _chunks(values: TimeValues) -> list[pa.Array]:
    """Input as Arrow string chunks (large_string kept, everything else cast to string)."""
    if isinstance(values, pa.ChunkedArray):
        chunks = list(values.chunks)
    elif isinstance(values, pa.Array):
        chunks = [values]
    else:
        try:
            chunks = [pa.array(values, type=pa.string())]
        except (pa.ArrowInvalid, pa.ArrowTypeError, TypeError):
            # Mixed Python objects: their text is what a CSV cell would have held.
            text = [None if v is None else str(v) for v in values]
            chunks = [pa.array(text, type=pa.string())]
    return [c if pa.types.is_string(c.type) or pa.types.is_large_string(c.type)
            else c.cast(pa.string()) for c in chunks if len(c)]


def _concat(parts: list[_Parsed]) -> _Parsed:
    if len(parts) == 1:
        return parts[0]
    if not parts:
        empty = np.zeros(0, dtype=np.int64)
        return _Parsed(empty, empty.astype(bool), empty.astype(bool))
    return _Parsed(np.concatenate([p.us for p in parts]), np.concatenate([p.ok for p in parts]),
                   np.concatenate([p.aware for p in parts]))


def parse_times(values: TimeValues, fmt: str, zone: str | None) -> tuple[np.ndarray, np.ndarray]:
    """Parse timestamp strings to int64 microseconds since the epoch (UTC).

    Returns ``(ts_us, reason)``: ``reason`` is int8 with 0 = ok, 1 = unparsable, 2 = ambiguous
    local time, 3 = non-existent local time (``REASONS[code]`` is the text); ``ts_us`` is 0
    wherever ``reason != 0``. Text with its own offset, ``Z``, ``UTC`` suffix or an epoch
    count ignores `zone`; naive text is wall-clock time in `zone` (IANA name, UTC when None).
    `fmt` is a name in FORMATS or a strptime pattern containing ``%``. Padding whitespace and
    quotes are tolerated; nulls and empty cells are unparsable. Fractions beyond microseconds
    are cut, not rounded; leap seconds (``:60``) are unparsable.
    """
    if fmt not in _READERS and "%" not in fmt:
        raise BadInputError(f"unknown time format {fmt!r}; expected one of {', '.join(FORMATS)} "
                            "or a strptime pattern with '%'")
    tz = _zone(zone)
    read = _read_pattern if fmt not in _READERS else _read_named
    parsed = _concat([read(chunk, fmt) for chunk in _chunks(values)])
    us, reason = _apply_zone(parsed, tz)
    return us.astype(np.int64, copy=False), reason


def guess_time_format(samples: list[str]) -> str | None:
    """The first name in FORMATS that parses every non-empty sample, or None.

    Order settles the ambiguous cases: '03/02/2026' reads as month-first (mdy comes before
    dmy), while a day above 12 or dotted dates fail mdy and fall through to dmy.
    """
    texts = pc.ascii_trim(pa.array(samples, type=pa.string()), _TRIM_CHARS)
    texts = texts.filter(pc.fill_null(pc.not_equal(texts, ""), False))
    if len(texts) == 0:
        return None
    for fmt in FORMATS:
        strict = _GUESS_SHAPES.get(fmt)
        if strict is not None and not _shape_ok(texts, strict).all():
            continue
        _, reason = parse_times(texts, fmt, None)
        if not reason.any():
            return fmt
    return None
