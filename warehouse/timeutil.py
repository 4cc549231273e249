"""Durations, user-given times and day sets, read the way practitioners write them."""
from __future__ import annotations

import re
from datetime import datetime
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
