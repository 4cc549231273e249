"""`warehouse compare`: did the upgrade, migration or patch change this counter?

Both periods are bucketed and combined as in sizing, filtered by the same windows and days, and
compared without assuming a distribution (statistics in stats/compare.py). Autocorrelation is
handled with effective sample sizes from the lag-1 autocorrelation of each period's ranks: forty
thousand one-minute samples of a counter with a daily rhythm count as a few hundred.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.series import Counter, combine, grid_for, select
from warehouse.sizing import SizeRequest, choose_combine, select_window
from warehouse.stats import bounds
from warehouse.stats.compare import ks_two_sample, mann_whitney, shift_interval
from warehouse.timeutil import Period, local_datetime, parse_duration, parse_period

KEYS = ("selector", "counters", "unit", "combine", "bucket_seconds", "window", "days", "before", "after",
        "shift", "shift_low", "shift_high", "confidence", "shift_method", "prob_after_higher",
        "mann_whitney_u", "p_value", "p_value_independent", "ks_d", "ks_p", "changed", "verdict", "cautions")
SIDE_KEYS = ("period", "start", "end", "n", "n_effective", "mean", "p50", "p50_low", "p50_high",
             "p95", "p95_low", "p95_high", "p99", "p99_low", "p99_high")
ALWAYS = ("A difference between two periods is not proof that the change you made caused it: anything else"
          " that differed between them (load, month end, season, other changes) shows up too.")
MIN_SAMPLES = 3


@dataclass(frozen=True)
class CompareRequest:
    selector: str
    before: str
    after: str
    window: str = "all"
    days: str | None = None
    busiest_hours: int = 1
    combine: str | None = None
    bucket: str = "1m"
    confidence: float = 0.95


def _check(req: CompareRequest, before: Period, after: Period) -> None:
    if not 0 < req.confidence < 1:
        raise WarehouseError(f"confidence must be between 0 and 1 (exclusive), got {req.confidence}")
    if before.start_us < after.end_us and after.start_us < before.end_us:
        raise WarehouseError(f"the periods overlap: --before {req.before} and --after {req.after} share time;"
                             " compare two separate periods")


def _samples(wh: Warehouse, ids: list[int], how: str, period: Period, req: CompareRequest,
             name: str) -> tuple[np.ndarray, np.ndarray]:
    """The period's bucket values (time order) after window and days, and their bucket times."""
    grid = grid_for(period.start_us, period.end_us, parse_duration(req.bucket))
    combined = combine(wh, ids, grid, how)
    mask, _ = select_window(combined, wh.zone, SizeRequest(req.selector, window=req.window, days=req.days,
                                                           busiest_hours=req.busiest_hours))
    inside = (grid.times >= period.start_us) & (grid.times < period.end_us)
    keep = mask & inside & np.isfinite(combined.values)
    if keep.sum() < MIN_SAMPLES:
        raise WarehouseError(f"the {name} period {period.label} holds {int(keep.sum())} samples of {req.selector!r}"
                             " (after the window and days chosen): too few to compare")
    return combined.values[keep], grid.times[keep]


def _side(x: np.ndarray, period: Period, zone: str, n_eff: float, confidence: float) -> dict[str, Any]:
    side: dict[str, Any] = {"period": period.label, "start": local_datetime(period.start_us, zone),
                            "end": local_datetime(period.end_us, zone), "n": int(x.size),
                            "n_effective": n_eff, "mean": float(np.mean(x))}
    for p in (50, 95, 99):
        est, low, high = bounds.quantile_ci(x, p / 100, confidence, replicates=400)
        side.update({f"p{p}": est, f"p{p}_low": low, f"p{p}_high": high})
    return {k: side[k] for k in SIDE_KEYS}


def compare_periods(wh: Warehouse, req: CompareRequest) -> dict[str, Any]:
    """Everything `warehouse compare` reports, with the stable keys of KEYS."""
    before, after = parse_period(req.before, wh.zone), parse_period(req.after, wh.zone)
    _check(req, before, after)
    counters = select(wh, req.selector)
    how = choose_combine(counters, req.combine)
    ids = [c.counter_id for c in counters]
    x, tx = _samples(wh, ids, how, before, req, "--before")
    y, ty = _samples(wh, ids, how, after, req, "--after")
    mw = mann_whitney(x, y, autocorrelation=True)
    naive = mann_whitney(x, y, method="asymptotic")
    shift = shift_interval(x, y, req.confidence, autocorrelation=True)
    ks = ks_two_sample(x, y, n1_effective=mw.n1_effective, n2_effective=mw.n2_effective)
    result: dict[str, Any] = {
        "selector": req.selector, "counters": len(counters), "unit": counters[0].unit, "combine": how,
        "bucket_seconds": parse_duration(req.bucket), "window": req.window, "days": req.days or "mon-sun",
        "before": _side(x, before, wh.zone, mw.n1_effective, req.confidence),
        "after": _side(y, after, wh.zone, mw.n2_effective, req.confidence),
        "shift": shift.estimate, "shift_low": shift.low, "shift_high": shift.high, "confidence": req.confidence,
        "shift_method": shift.method, "prob_after_higher": 1.0 - mw.auc, "mann_whitney_u": mw.u,
        "p_value": mw.p, "p_value_independent": naive.p, "ks_d": ks.d, "ks_p": ks.p,
    }
    result["changed"] = bool(mw.p < 1 - req.confidence and (shift.low > 0 or shift.high < 0))
    result["verdict"] = verdict(result, _name(counters, req.selector))
    result["cautions"] = cautions(result, tx, ty, wh.zone)
    return {k: result[k] for k in KEYS}


def _name(counters: list[Counter], selector: str) -> str:
    return counters[0].key if len(counters) == 1 else selector


def _fmt(value: float, unit: str) -> str:
    text = f"{value:,.3g}" if abs(value) < 1000 else f"{value:,.0f}"
    return f"{text} {unit}".rstrip()


def verdict(r: dict[str, Any], name: str) -> str:
    """One sentence with the effect in the counter's unit."""
    u = r["unit"] or ""
    b, a = r["before"], r["after"]
    interval = (f"shift {_fmt(r['shift'], u)} [{_fmt(r['shift_low'], u)}, {_fmt(r['shift_high'], u)}]"
                f" ({r['confidence']:.0%} interval, Hodges-Lehmann)")
    if not r["changed"]:
        return (f"no clear change in {name}: p95 {_fmt(b['p95'], u)} before, {_fmt(a['p95'], u)} after; {interval}"
                f" includes 0 or p = {r['p_value']:.2g} is not below {1 - r['confidence']:.2g}")
    moved = "rose" if r["shift"] > 0 else "fell"
    return (f"{name} {moved}: p95 from {_fmt(b['p95'], u)} to {_fmt(a['p95'], u)}, median from"
            f" {_fmt(b['p50'], u)} to {_fmt(a['p50'], u)}; {interval}; Mann-Whitney p = {r['p_value']:.2g}"
            f" with about {b['n_effective']:.0f} + {a['n_effective']:.0f} independent samples")


def _weekend_share(times: np.ndarray, zone: str) -> float:
    import pandas as pd
    local = pd.DatetimeIndex(pd.to_datetime(times, unit="us", utc=True)).tz_convert(zone)
    return float(np.mean(local.day_of_week >= 5))


def cautions(r: dict[str, Any], tx: np.ndarray, ty: np.ndarray, zone: str) -> list[str]:
    out: list[str] = []
    b, a = r["before"], r["after"]
    if min(b["n_effective"], a["n_effective"]) < 30:
        alike = b["n_effective"] < 0.5 * b["n"] or a["n_effective"] < 0.5 * a["n"]
        out.append(f"Few independent samples: about {b['n_effective']:.0f} before and {a['n_effective']:.0f} after"
                   + (" (neighbouring samples are alike, so they count for less)" if alike else "")
                   + "; the p-values and intervals are rough.")
    wb, wa = _weekend_share(tx, zone), _weekend_share(ty, zone)
    if abs(wb - wa) > 0.1:
        out.append(f"The periods hold different mixes of days ({wb:.0%} weekend samples before, {wa:.0%} after):"
                   " compare whole weeks, or use --days mon-fri.")
    if r["p_value_independent"] < 0.05 <= r["p_value"]:
        out.append(f"Treating the samples as independent would give p = {r['p_value_independent']:.2g}:"
                   " that figure overstates the evidence, because neighbouring samples are alike.")
    out.append(ALWAYS)
    return out
