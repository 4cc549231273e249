"""`warehouse patterns`: periodic peaks, episodes above a threshold, calendar profile, level shifts."""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats as sps

from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.series import combine, grid_for, select, user_range
from warehouse.sizing import choose_combine
from warehouse.stats import bounds
from warehouse.stats import patterns as ps
from warehouse.stats.rhythm import hour_of_week, remove_rhythm
from warehouse.timeutil import DAY_NAMES, format_duration, parse_duration

ABSENCE = ("Not finding a pattern does not prove there is none: a period longer than a third of the range,"
           " shorter than two buckets, or weaker than the noise can hide.")


@dataclass(frozen=True)
class PatternRequest:
    selector: str
    start: str | None = None
    end: str | None = None
    bucket: str = "1m"
    min_period: str = "2m"
    max_period: str = "8d"
    above: str = "p95"
    gap: str = "5m"
    combine: str | None = None


def _threshold(above: str, x: np.ndarray) -> tuple[float, str]:
    """A value, a percentile like p95, or `bound` (the 95% Cantelli sizing bound of the series)."""
    text = above.strip().lower()
    if text == "bound":
        return bounds.size(x, 0.95).bound, "bound (Cantelli 95%)"
    match = re.fullmatch(r"p(\d{1,2}(?:\.\d+)?)", text)
    if match:
        return float(np.quantile(x, float(match[1]) / 100)), f"p{match[1]}"
    try:
        return float(text), "value"
    except ValueError as exc:
        raise WarehouseError(f"cannot read --above {above!r}: use a value, pNN (e.g. p95) or bound") from exc


def find_patterns(wh: Warehouse, req: PatternRequest) -> dict[str, Any]:
    counters = select(wh, req.selector)
    how = choose_combine(counters, req.combine)
    ids = [c.counter_id for c in counters]
    lo, hi = user_range(wh, ids, req.start, req.end)
    bucket = parse_duration(req.bucket)
    grid = grid_for(lo, hi, bucket)
    series = combine(wh, ids, grid, how).values
    have = np.isfinite(series)
    first, last = np.flatnonzero(have)[[0, -1]]
    series, times = series[first:last + 1], grid.times[first:last + 1]
    x = series[np.isfinite(series)]
    if np.ptp(x) == 0:
        raise WarehouseError(f"{req.selector!r} is constant in the range: no pattern to find")
    min_p, max_p = parse_duration(req.min_period), parse_duration(req.max_period)
    span = len(series) * bucket
    if min_p < 2 * bucket:
        min_p = 2 * bucket
    if max_p > span / 2:
        max_p = span / 2
    if max_p <= min_p:
        raise WarehouseError(f"too few buckets ({len(series)} of {format_duration(bucket)}) for periods between"
                             f" {req.min_period} and {req.max_period}: widen the range or shorten --bucket")
    periods = ps.find_periods(series, float(bucket), min_period=float(min_p), max_period=float(max_p))
    threshold, label = _threshold(req.above, x)
    gap_buckets = max(1, parse_duration(req.gap) // bucket)
    found = ps.episodes(series, times, threshold, gap_buckets=gap_buckets, bucket_us=grid.bucket_us)
    local = pd.DatetimeIndex(pd.to_datetime(times, unit="us", utc=True)).tz_convert(wh.zone)
    result = {
        "selector": req.selector, "counters": len(ids), "combine": how, "unit": counters[0].unit,
        "bucket_seconds": bucket, "first_ts": local[0].to_pydatetime(), "last_ts": local[-1].to_pydatetime(),
        "periods": [{"seconds": p.seconds, "label": p.label, "strength": p.strength, "p": p.p,
                     "harmonics": list(p.harmonics), "acf": p.acf} for p in periods],
        "threshold": threshold, "threshold_kind": label,
        "episodes": [_episode(e, wh.zone) for e in found],
        "episode_clustering": clustering(found, local, np.isfinite(series), wh.zone),
        "calendar": calendar(series, local),
        "change_points": _changes(series, local, wh.zone),
    }
    result["cautions"] = _cautions(series, periods, result)
    return result


def _stamp(us: int, zone: str) -> Any:
    return pd.Timestamp(int(us) * 1000, tz="UTC").tz_convert(zone).to_pydatetime()


def _episode(e: dict[str, Any], zone: str) -> dict[str, Any]:
    return {"start": _stamp(e["start_us"], zone), "end": _stamp(e["end_us"], zone),
            "seconds": (e["end_us"] - e["start_us"]) / 1e6, "peak": e["peak"]}


def clustering(found: list[dict[str, Any]], local: pd.DatetimeIndex, observed: np.ndarray, zone: str) -> dict[str, Any]:
    """Do episodes start at some hours or weekdays more than observation time explains? (chi-square)."""
    starts = pd.DatetimeIndex(pd.to_datetime([e["start_us"] for e in found], unit="us", utc=True)).tz_convert(zone)
    out: dict[str, Any] = {"episodes": len(found)}
    for name, bins, of_starts, of_grid in (("hour", 24, starts.hour, local.hour),
                                           ("weekday", 7, starts.day_of_week, local.day_of_week)):
        counts = np.bincount(np.asarray(of_starts, dtype=int), minlength=bins)
        exposure = np.bincount(np.asarray(of_grid, dtype=int)[observed], minlength=bins).astype(float)
        out[f"by_{name}"] = counts.tolist()
        out[f"{name}_p"] = _chi2(counts, exposure)
    out["weekday_names"] = list(DAY_NAMES)
    out["clustered"] = bool(len(found) >= 5 and min(p for p in (out["hour_p"], out["weekday_p"]) if p is not None) < 0.01) \
        if out["hour_p"] is not None else False
    return out


def _chi2(counts: np.ndarray, exposure: np.ndarray) -> float | None:
    keep = exposure > 0
    if counts.sum() < 5 or keep.sum() < 2:
        return None
    expected = exposure[keep] / exposure[keep].sum() * counts.sum()
    return float(sps.chisquare(counts[keep], expected).pvalue)


def calendar(series: np.ndarray, local: pd.DatetimeIndex) -> list[dict[str, Any]]:
    """Hour-of-day x weekday mean and p95 in the warehouse zone."""
    frame = pd.DataFrame({"weekday": local.day_of_week, "hour": local.hour, "v": series}).dropna()
    grouped = frame.groupby(["weekday", "hour"])["v"]
    table = pd.DataFrame({"mean": grouped.mean(), "p95": grouped.quantile(0.95)}).reset_index()
    return [{"weekday": DAY_NAMES[int(r.weekday)], "hour": int(r.hour), "mean": float(r.mean), "p95": float(r.p95)}
            for r in table.itertuples()]


def _changes(series: np.ndarray, local: pd.DatetimeIndex, zone: str) -> list[dict[str, Any]]:
    """Level shifts, found on hourly means with the calendar rhythm removed.

    A day/night or weekday/weekend swing is itself a change in the mean every few hours; taking
    each hour-of-week (two weeks or more) or hour-of-day (two days or more) median out first leaves
    the shifts that are not part of the rhythm. Before and after means are of the series itself."""
    hourly = pd.Series(series, index=local).resample("1h").mean()
    values = hourly.to_numpy()
    span_days = (hourly.index[-1] - hourly.index[0]).total_seconds() / 86400
    if span_days >= 14:
        slots = hour_of_week(hourly.index.day_of_week, hourly.index.hour)
        residual = remove_rhythm(values[:, None], slots)[:, 0]
    elif span_days >= 2:
        residual = remove_rhythm(values[:, None], np.asarray(hourly.index.hour))[:, 0]
    else:
        residual = values
    have = np.flatnonzero(np.isfinite(residual))
    if len(have) < 8:
        return []
    found = ps.change_points(residual[have])
    cuts = [0] + [int(have[c.index]) for c in found] + [len(values)]
    out = []
    for k, c in enumerate(found):
        before, after = values[cuts[k]:cuts[k + 1]], values[cuts[k + 1]:cuts[k + 2]]
        out.append({"ts": hourly.index[cuts[k + 1]].to_pydatetime(),
                    "before_mean": float(np.nanmean(before)), "after_mean": float(np.nanmean(after))})
    return out


def _cautions(series: np.ndarray, periods: list[Any], result: dict[str, Any]) -> list[str]:
    out = []
    missing = 1 - np.isfinite(series).mean()
    if missing > 0.2:
        out.append(f"{missing:.0%} of buckets are empty: periods come from the Lomb-Scargle periodogram, and"
                   " episodes cannot see inside the gaps.")
    if result["change_points"]:
        out.append("The level changed inside the range: a figure over the whole range mixes the regimes.")
    if not periods:
        out.append("No periodic component passed the test at p < 0.01.")
    out.append(ABSENCE)
    return out
