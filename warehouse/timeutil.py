"""Durations, user-given times and day sets, read the way practitioners write them."""
from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from zoneinfo import ZoneInfo

import pandas as pd

from warehouse.errors import WarehouseError

_DURATION = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(s|sec|m|min|h|d)?\s*$", re.IGNORECASE)
_UNIT_SECONDS = {"s": 1, "sec": 1, "m": 60, "min": 60, "h": 3600, "d": 86400}
DAY_NAMES = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")


def parse_duration(text: str) -> int:
    """'15s', '1m', '2h', '1d', or plain seconds -> whole seconds (at least 1)."""
    match = _DURATION.match(text or "")
    if not match:
        raise WarehouseError(f"cannot read duration {text!r}: use e.g. 15s, 1m, 1h, 1d")
    seconds = float(match[1]) * _UNIT_SECONDS[(match[2] or "s").lower()]
    if seconds < 1 or seconds != int(seconds):
        raise WarehouseError(f"duration {text!r} must be a whole number of seconds, at least 1")
    return int(seconds)


def parse_when(text: str, zone: str) -> int:
    """A date or date-time; without an offset it is local time in `zone`. Returns UTC microseconds."""
    try:
        stamp = pd.Timestamp(text)
    except (ValueError, TypeError) as exc:
        raise WarehouseError(f"cannot read time {text!r}: use e.g. 2026-03-02 or 2026-03-02T08:00") from exc
    if stamp is pd.NaT:
        raise WarehouseError(f"cannot read time {text!r}")
    if stamp.tzinfo is None:
        try:
            stamp = stamp.tz_localize(zone, ambiguous="raise", nonexistent="raise")
        except Exception as exc:  # pandas raises several types for DST problems
            raise WarehouseError(f"local time {text!r} is ambiguous or does not exist in {zone}") from exc
    return int(stamp.tz_convert("UTC").value // 1000)


def parse_days(text: str | None) -> frozenset[int]:
    """'mon-fri', 'sat,sun', 'mon,wed-fri' -> weekday numbers (Monday = 0)."""
    if not text:
        return frozenset(range(7))
    days: set[int] = set()
    for part in text.lower().split(","):
        ends = [p.strip()[:3] for p in part.split("-")]
        if any(e not in DAY_NAMES for e in ends) or len(ends) > 2:
            raise WarehouseError(f"cannot read days {text!r}: use e.g. mon-fri or sat,sun")
        a, b = DAY_NAMES.index(ends[0]), DAY_NAMES.index(ends[-1])
        days.update(range(a, b + 1) if a <= b else [*range(a, 7), *range(0, b + 1)])
    return frozenset(days)


def parse_clock_window(text: str) -> tuple[int, int]:
    """'08:00-18:00' -> (480, 1080) minutes after local midnight; end exclusive, may wrap midnight."""
    match = re.fullmatch(r"\s*(\d{1,2}):(\d{2})\s*-\s*(\d{1,2}):(\d{2})\s*", text)
    if not match:
        raise WarehouseError(f"cannot read window {text!r}: use all, busiest-hours or HH:MM-HH:MM")
    start, end = int(match[1]) * 60 + int(match[2]), int(match[3]) * 60 + int(match[4])
    if start > 24 * 60 or end > 24 * 60 or start == end:
        raise WarehouseError(f"window {text!r} is empty or out of range")
    return start, end


def format_duration(seconds: float) -> str:
    """Human terms: '45 s', '10 min', '1 h 30 min', '7 days'."""
    seconds = float(seconds)
    if seconds < 90:
        return f"{seconds:g} s"
    if seconds < 5400:
        return f"{seconds / 60:.3g} min"
    if seconds < 86400 - 30:
        hours, minutes = divmod(round(seconds / 60), 60)
        return f"{hours} h" + (f" {minutes} min" if minutes else "")
    days = f"{seconds / 86400:.3g}"
    return f"{days} day" if days == "1" else f"{days} days"


def local_datetime(us: int, zone: str) -> datetime:
    return pd.Timestamp(us * 1000, tz="UTC").tz_convert(ZoneInfo(zone)).to_pydatetime()


_ISO_WEEK = re.compile(r"^\s*(\d{4})-?W(\d{1,2})\s*$", re.IGNORECASE)
_MONTH = re.compile(r"^\s*(\d{4})-(\d{2})\s*$")
_DAY = re.compile(r"^\s*(\d{4})-(\d{2})-(\d{2})\s*$")


@dataclass(frozen=True)
class Period:
    """[start_us, end_us) in UTC microseconds; kind is week, day, month or range (as typed)."""

    start_us: int
    end_us: int
    kind: str
    label: str


def _local_midnight(day: date, zone: str) -> int:
    return parse_when(day.isoformat(), zone)


def _add_months(day: date, months: int) -> date:
    index = day.year * 12 + day.month - 1 + months
    return date(index // 12, index % 12 + 1, 1)


def parse_period(text: str, zone: str) -> Period:
    """'2026-W14' (ISO week, Monday to Monday), '2026-03-16' (a day), '2026-03' (a month) or
    'T1..T2' (end exclusive); all local in `zone` unless a time carries an offset."""
    text = (text or "").strip()
    try:
        if match := _ISO_WEEK.match(text):
            monday = date.fromisocalendar(int(match[1]), int(match[2]), 1)
            return Period(_local_midnight(monday, zone), _local_midnight(monday + timedelta(days=7), zone),
                          "week", f"{int(match[1])}-W{int(match[2]):02d}")
        if match := _MONTH.match(text):
            first = date(int(match[1]), int(match[2]), 1)
            return Period(_local_midnight(first, zone), _local_midnight(_add_months(first, 1), zone), "month", text)
        if match := _DAY.match(text):
            day = date(int(match[1]), int(match[2]), int(match[3]))
            return Period(_local_midnight(day, zone), _local_midnight(day + timedelta(days=1), zone), "day", text)
    except ValueError as exc:
        raise WarehouseError(f"cannot read period {text!r}: {exc}") from exc
    if ".." not in text:
        raise WarehouseError(f"cannot read period {text!r}: use e.g. 2026-W14, 2026-03-16, 2026-03 or"
                             " 2026-03-02..2026-03-09T12:00")
    first, _, last = text.partition("..")
    if not first.strip() or not last.strip():
        raise WarehouseError(f"period {text!r} needs a start and an end: T1..T2")
    start, end = parse_when(first.strip(), zone), parse_when(last.strip(), zone)
    if end <= start:
        raise WarehouseError(f"empty period {text!r}: its end is not after its start")
    return Period(start, end, "range", text)


def period_before(period: Period, k: int, zone: str) -> Period:
    """The k-th comparable period before `period`: the k-th previous week or month; for a day or a
    range of up to a week, the same local clock span k weeks earlier (same weekdays); for a longer
    range, the span of the same length ending k lengths earlier."""
    if period.kind == "month":
        first = local_datetime(period.start_us, zone).date()
        a = _add_months(first, -k)
        return Period(_local_midnight(a, zone), _local_midnight(_add_months(a, 1), zone), "month", a.strftime("%Y-%m"))
    length = period.end_us - period.start_us
    if period.kind in ("week", "day") or length <= 7 * 86_400 * 1_000_000:
        back = (lambda us: _shift_local(us, zone, days=-7 * k))
        start, end = back(period.start_us), back(period.end_us)
        year, week, _ = local_datetime(start, zone).isocalendar()
        label = {"week": f"{year}-W{week:02d}", "day": local_datetime(start, zone).strftime("%Y-%m-%d")}.get(
            period.kind, local_datetime(start, zone).strftime("%Y-%m-%d %H:%M"))
        return Period(start, end, period.kind, label)
    start = period.start_us - k * length
    return Period(start, start + length, "range", local_datetime(start, zone).strftime("%Y-%m-%d %H:%M"))


def _shift_local(us: int, zone: str, *, days: int) -> int:
    """Move a time by whole local days (the wall clock kept across a DST change)."""
    local = local_datetime(us, zone).replace(tzinfo=None) + timedelta(days=days)
    return parse_when(local.isoformat(), zone)
