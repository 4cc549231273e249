"""`warehouse size`: a capacity figure with a stated guarantee, its alternatives, and cautions."""
from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import pandas as pd

from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.series import Combined, Counter, combine, grid_for, select, user_range
from warehouse.stats import bounds
from warehouse.timeutil import format_duration, parse_clock_window, parse_days, parse_duration

KEYS = ("selector", "counters", "unit", "n", "n_effective", "mean", "sd", "min", "max", "p50", "p95", "p99",
        "coverage_target", "k", "bound", "coverage_observed", "chebyshev_two_sided_coverage",
        "quantile_at_target", "quantile_ci_low", "quantile_ci_high", "confidence", "window", "busiest_hours",
        "days", "combine", "bucket_seconds", "first_ts", "last_ts", "capacity", "above_capacity_fraction",
        "headroom", "cautions")
ALWAYS = ("The bound describes the observed period only: repeat the analysis on other periods"
          " (other weeks, month ends, seasonal peaks) before buying.")


@dataclass(frozen=True)
class SizeRequest:
    selector: str
    start: str | None = None
    end: str | None = None
    coverage: float = 0.95
    window: str = "all"
    days: str | None = None
    combine: str | None = None
    bucket: str = "1m"
    capacity: float | None = None
    confidence: float = 0.9
    busiest_hours: int = 1


def _check(req: SizeRequest) -> None:
    if not 0 < req.coverage < 1:
        raise WarehouseError(f"coverage must be between 0 and 1 (exclusive), got {req.coverage}")
    if not 0 < req.confidence < 1:
        raise WarehouseError(f"confidence must be between 0 and 1 (exclusive), got {req.confidence}")
    if not 1 <= req.busiest_hours <= 23:
        raise WarehouseError(f"busiest hours per day must be 1..23, got {req.busiest_hours}")


def choose_combine(counters: list[Counter], requested: str | None) -> str:
    """Sum by default for one counter across hosts; refuse to mix units; ask when names differ."""
    units = sorted({c.unit for c in counters})
    if len(units) > 1:
        raise WarehouseError(f"the selector matches counters with different units ({', '.join(repr(u) for u in units)}):"
                             " narrow it to one kind of counter")
    if requested:
        return requested
    names = {c.counter for c in counters}
    if len(counters) > 1 and len(names) > 1:
        raise WarehouseError(f"the selector matches {len(counters)} counters with {len(names)} different names:"
                             " choose --combine sum|mean|max, or narrow the selector")
    return "sum"


def size_selector(wh: Warehouse, req: SizeRequest) -> dict[str, Any]:
    """Everything `warehouse size` reports, as a dict with the stable keys of KEYS."""
    _check(req)
    counters = select(wh, req.selector)
    how = choose_combine(counters, req.combine)
    ids = [c.counter_id for c in counters]
    lo, hi = user_range(wh, ids, req.start, req.end)
    grid = grid_for(lo, hi, parse_duration(req.bucket))
    combined = combine(wh, ids, grid, how)
    mask, window_label = select_window(combined, wh.zone, req)
    x = combined.values[mask]
    x = x[np.isfinite(x)]
    if len(x) == 0:
        raise WarehouseError("no samples of the selected counters fall in the window and days chosen")
    s = bounds.size(x, req.coverage, confidence=req.confidence, capacity=req.capacity)
    kept = np.flatnonzero(mask & np.isfinite(combined.values))
    result = {
        "selector": req.selector, "counters": len(counters), "unit": counters[0].unit,
        **asdict(s), "confidence": req.confidence, "window": window_label,
        "busiest_hours": req.busiest_hours if req.window == "busiest-hours" else None,
        "days": req.days or "mon-sun", "combine": how, "bucket_seconds": grid.bucket_seconds,
        "first_ts": _stamp(grid.times[kept[0]], wh.zone), "last_ts": _stamp(grid.times[kept[-1]], wh.zone),
    }
    result["cautions"] = cautions(combined, mask, s, wh.zone)
    return {k: result.get(k) for k in KEYS}


def _stamp(us: int, zone: str) -> pd.Timestamp:
    return pd.Timestamp(int(us) * 1000, tz="UTC").tz_convert(zone).to_pydatetime()


def _local(combined: Combined, zone: str) -> pd.DatetimeIndex:
    return pd.DatetimeIndex(pd.to_datetime(combined.grid.times, unit="us", utc=True)).tz_convert(zone)


def select_window(combined: Combined, zone: str, req: SizeRequest) -> tuple[np.ndarray, str]:
    """Which buckets to size on: all, a clock window, or each day's busiest hour(s); days filter first."""
    local = _local(combined, zone)
    mask = np.isin(local.day_of_week, sorted(parse_days(req.days))) & np.isfinite(combined.values)
    if req.window == "all":
        return mask, "all"
    if req.window == "busiest-hours":
        return mask & busiest_hours_mask(local, combined.values, mask, req.busiest_hours), "busiest-hours"
    start, end = parse_clock_window(req.window)
    minute = local.hour * 60 + local.minute
    inside = (minute >= start) & (minute < end) if start < end else (minute >= start) | (minute < end)
    return mask & np.asarray(inside), req.window


def busiest_hours_mask(local: pd.DatetimeIndex, values: np.ndarray, eligible: np.ndarray, hours: int) -> np.ndarray:
    """For each local day, the `hours` clock hours with the highest mean of the combined series."""
    frame = pd.DataFrame({"day": local.date, "hour": local.hour, "v": np.where(eligible, values, np.nan)})
    means = frame.groupby(["day", "hour"], sort=False)["v"].mean().dropna()
    top = means.groupby(level="day", group_keys=False).nlargest(hours)
    chosen = set(top.index)
    return np.fromiter(((d, h) in chosen for d, h in zip(frame["day"], frame["hour"])), dtype=bool, count=len(frame))


def cautions(combined: Combined, mask: np.ndarray, s: bounds.Sizing, zone: str) -> list[str]:
    """Plain sentences for what could make the figure mislead."""
    out: list[str] = []
    if s.n < 100 or s.n_effective < 30:
        out.append(f"Few samples: n = {s.n}, about {s.n_effective:.0f} independent; the percentiles and their"
                   " interval are rough.")
    if s.bound > s.max:
        out.append(f"The bound ({s.bound:.4g}) is above the observed maximum ({s.max:.4g}): Cantelli's guarantee holds"
                   " for any distribution, so it is conservative; the empirical p-quantile shows what this data needed.")
    out += _gap_cautions(combined)
    out += _drift_cautions(combined, mask, zone)
    out.append(ALWAYS)
    return out


def _gap_cautions(combined: Combined) -> list[str]:
    have = np.isfinite(combined.values)
    first, last = np.flatnonzero(have)[[0, -1]]
    inside = have[first:last + 1]
    missing = 1 - inside.mean()
    out = []
    if missing > 0.5:
        out.append(f"{missing:.0%} of buckets have no sample: is --bucket shorter than the sampling interval?")
    elif missing > 0:
        runs = np.diff(np.flatnonzero(np.diff(np.r_[1, inside.astype(int), 1])))[::2] if not inside.all() else [0]
        longest = max(runs) * combined.grid.bucket_seconds
        if longest >= 3 * combined.grid.bucket_seconds:
            out.append(f"The range holds gaps: {missing:.1%} of buckets have no sample (longest {format_duration(longest)}).")
    partial = (combined.present[first:last + 1][inside] < combined.counters).mean() if combined.counters > 1 else 0
    if partial > 0.01:
        out.append(f"In {partial:.1%} of buckets not every counter had a sample: there the combined value covers"
                   " only the counters present.")
    return out


def _drift_cautions(combined: Combined, mask: np.ndarray, zone: str) -> list[str]:
    """Trend or level shift across days: the past period may not describe the next one."""
    local = _local(combined, zone)
    daily = pd.Series(np.where(mask, combined.values, np.nan)).groupby(np.asarray(local.date)).mean().dropna()
    if len(daily) < 10:
        return []
    from scipy import stats as sps  # imported here: it costs about a second and few runs need it
    out = []
    rho, p = sps.spearmanr(np.arange(len(daily)), daily.to_numpy())
    if p < 0.01 and abs(rho) >= 0.5:
        out.append(f"The daily means trend {'up' if rho > 0 else 'down'} across the range (Spearman rho {rho:.2f}):"
                   " the bound describes the past period, not the next one.")
    shift = level_shift(daily.to_numpy())
    if shift is not None:
        k, before, after = shift
        out.append(f"The level shifts around {daily.index[k]}: daily mean {before:.4g} before, {after:.4g} after;"
                   " consider sizing on the period after the change.")
    return out


def level_shift(daily: np.ndarray, min_side: int = 3) -> tuple[int, float, float] | None:
    """The split of daily means with the largest standardised mean difference, if clear
    (Mann-Whitney p < 0.001 and a difference above one pooled sd)."""
    best: tuple[float, int] | None = None
    for k in range(min_side, len(daily) - min_side + 1):
        a, b = daily[:k], daily[k:]
        pooled = np.sqrt((a.var() * len(a) + b.var() * len(b)) / len(daily)) or 1e-12
        d = abs(b.mean() - a.mean()) / pooled
        if best is None or d > best[0]:
            best = (d, k)
    if best is None or best[0] < 1.0:
        return None
    from scipy import stats as sps
    k = best[1]
    p = sps.mannwhitneyu(daily[:k], daily[k:]).pvalue
    return (k, float(daily[:k].mean()), float(daily[k:].mean())) if p < 0.001 else None
