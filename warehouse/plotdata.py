"""The arrays behind each plot, gathered through the same public readers the commands use.

Each function repeats only the reading steps of its command (selector, range, grid, combine,
window), never the statistics, so a plot shows the very buckets the figures were computed from.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.series import combine, grid_for, select, user_range
from warehouse.timeutil import parse_duration, parse_period, period_before

OVERLAY_BUCKETS = 240   # the overlay of target and suspects shows at most this many buckets


@dataclass(frozen=True)
class Series:
    """Bucket start times (UTC microseconds) and values of one series; mask: the buckets used."""

    times: np.ndarray
    values: np.ndarray
    mask: np.ndarray
    label: str
    unit: str
    zone: str


def size_series(wh: Warehouse, req: Any) -> Series:
    """The combined series `warehouse size` sized, and the buckets its window and days kept."""
    from warehouse.sizing import choose_combine, select_window

    counters = select(wh, req.selector)
    how = choose_combine(counters, req.combine)
    ids = [c.counter_id for c in counters]
    lo, hi = user_range(wh, ids, req.start, req.end)
    combined = combine(wh, ids, grid_for(lo, hi, parse_duration(req.bucket)), how)
    mask, _ = select_window(combined, wh.zone, req)
    return Series(combined.grid.times, combined.values, mask & np.isfinite(combined.values),
                  req.selector, counters[0].unit, wh.zone)


def _ids_of_key(wh: Warehouse, key: str) -> list[int]:
    rows = wh.con.execute("SELECT counter_id FROM counters WHERE key = ?", [key]).fetchall()
    if not rows:
        raise WarehouseError(f"no counter with key {key!r}")
    return [r[0] for r in rows]


def _unit_of_key(wh: Warehouse, key: str) -> str:
    row = wh.con.execute("SELECT unit FROM counters WHERE key = ?", [key]).fetchone()
    return (row[0] if row else "") or ""


def correlate_overlay(wh: Warehouse, req: Any, result: dict[str, Any], suspects: int = 3) -> list[Series]:
    """The target and its first suspects on the target's grid, cut to the stretch around the
    target's highest bucket (at most OVERLAY_BUCKETS) so a lag of a few buckets stays visible."""
    targets = select(wh, req.target or "")
    tids = [c.counter_id for c in targets]
    lo, hi = user_range(wh, tids, req.start, req.end)
    grid = grid_for(lo, hi, parse_duration(req.bucket))
    target = combine(wh, tids, grid, "sum").values
    cut = _around_peak(target, OVERLAY_BUCKETS)
    times = grid.times[cut]
    out = [Series(times, target[cut], np.isfinite(target[cut]), req.target or "", targets[0].unit, wh.zone)]
    for row in result["results"][:suspects]:
        values = combine(wh, _ids_of_key(wh, row["key"]), grid, "sum").values[cut]
        out.append(Series(times, values, np.isfinite(values), row["key"], _unit_of_key(wh, row["key"]), wh.zone))
    return out


def _around_peak(values: np.ndarray, width: int) -> slice:
    if len(values) <= width:
        return slice(0, len(values))
    peak = int(np.nanargmax(values))
    start = min(max(0, peak - width // 2), len(values) - width)
    return slice(start, start + width)


@dataclass(frozen=True)
class Spectrum:
    """Periodogram of the detrended series: period (seconds) and power, longest period first."""

    periods: np.ndarray
    power: np.ndarray


def patterns_series(wh: Warehouse, req: Any) -> Series:
    """The series `warehouse patterns` analysed, trimmed to its first and last bucket with a value."""
    from warehouse.sizing import choose_combine

    counters = select(wh, req.selector)
    how = choose_combine(counters, req.combine)
    ids = [c.counter_id for c in counters]
    lo, hi = user_range(wh, ids, req.start, req.end)
    combined = combine(wh, ids, grid_for(lo, hi, parse_duration(req.bucket)), how)
    have = np.flatnonzero(np.isfinite(combined.values))
    keep = slice(have[0], have[-1] + 1)
    values = combined.values[keep]
    return Series(combined.grid.times[keep], values, np.isfinite(values), req.selector, counters[0].unit, wh.zone)


def spectrum(values: np.ndarray, bucket_seconds: float) -> Spectrum:
    """Hann-tapered periodogram of the series with its least-squares line removed and gaps filled
    linearly: a picture of where the power lies (the test itself is in stats/patterns.py)."""
    from scipy.signal import periodogram

    x = np.asarray(values, dtype=float)
    idx = np.arange(len(x))
    have = np.isfinite(x)
    filled = np.interp(idx, idx[have], x[have])
    slope, intercept = np.polyfit(idx, filled, 1)
    freq, power = periodogram(filled - (slope * idx + intercept), fs=1.0 / bucket_seconds, window="hann",
                              detrend=False)
    keep = freq > 0
    return Spectrum(1.0 / freq[keep][::-1], power[keep][::-1])


def compare_samples(wh: Warehouse, req: Any) -> tuple[np.ndarray, np.ndarray]:
    """The before and after samples `warehouse compare` tested (after its window and days)."""
    from warehouse.compare import _samples
    from warehouse.sizing import choose_combine

    counters = select(wh, req.selector)
    how = choose_combine(counters, req.combine)
    ids = [c.counter_id for c in counters]
    before, after = parse_period(req.before, wh.zone), parse_period(req.after, wh.zone)
    x, _ = _samples(wh, ids, how, before, req, "--before")
    y, _ = _samples(wh, ids, how, after, req, "--after")
    return x, y


def changes_history(wh: Warehouse, req: Any, result: dict[str, Any], rows: int) -> dict[str, list[float]]:
    """Per listed counter, its period means oldest first, the chosen period last (NaN: no samples)."""
    from warehouse.changes import chosen_period, period_stats

    period = chosen_period(wh, req)
    periods = [period] + [period_before(period, k, wh.zone) for k in range(1, req.history + 1)]
    keys = [r["key"] for r in result["results"][:rows]]
    if not keys:
        return {}
    found = wh.con.execute("SELECT key, counter_id FROM counters WHERE key IN (SELECT unnest(?::VARCHAR[]))",
                           [keys]).fetchall()
    by_id = {cid: key for key, cid in found}
    stats, _ = period_stats(wh, periods, period.kind, sorted(by_id))
    out = {key: [float("nan")] * len(periods) for key in keys}
    for cid, k, mean in stats[["counter_id", "k", "mean"]].itertuples(index=False):
        out[by_id[int(cid)]][len(periods) - 1 - int(k)] = float(mean)
    return out


@dataclass(frozen=True)
class TrendLine:
    """One trend series for plotting: weeks, values, which weeks were fitted, and the fitted line
    as value = pivot_y + slope * (weeks since the first fitted week - pivot_x)."""

    key: str
    unit: str
    weeks: list[Any]
    values: np.ndarray
    fitted: np.ndarray
    line: Any | None


def trend_lines(result: dict[str, Any]) -> list[TrendLine]:
    """The Theil-Sen line of each series again from its weekly rows (the same rule as trend._fit)."""
    from warehouse.stats.trend import theil_sen

    out = []
    for s in result["series"]:
        weeks = [w["week"] for w in s["weeks"]]
        values = np.array([np.nan if w["value"] is None else w["value"] for w in s["weeks"]], dtype=float)
        fitted = np.array([bool(w["complete"]) and np.isfinite(v) for w, v in zip(s["weeks"], values)])
        line = None
        if s["fit"] is not None and fitted.sum() >= 2:
            origin = s["fit"]["first_week"]
            x = np.array([(w - origin).days / 7.0 for w in np.asarray(weeks, dtype=object)[fitted]])
            line = theil_sen(x, values[fitted], result["confidence"])
        out.append(TrendLine(s["key"], s["unit"], weeks, values, fitted, line))
    return out
