"""`size` and `correlate` (target-vs-all) with their heavy reading on Spark.

Each follows its DuckDB twin (warehouse/sizing.py, warehouse/correlate.py) step for step; only the
reading is replaced: Spark reduces the points to the combined series (sizing) or to per-counter
co-moments with the target (correlation), and the figures come from the same functions.
"""
from __future__ import annotations

from dataclasses import asdict
from typing import Any

import numpy as np

from warehouse import correlate as duck_correlate
from warehouse import sizing
from warehouse.correlate import LAG_NOTE, CorrelateRequest
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.series import grid_for, select, user_range
from warehouse.sizing import SizeRequest
from warehouse.spark.series import combined, target_correlations, target_series
from warehouse.stats import bounds
from warehouse.stats import correlate as cs
from warehouse.timeutil import parse_duration


def size_selector(wh: Warehouse, req: SizeRequest, spark: Any) -> dict[str, Any]:
    """warehouse.sizing.size_selector, with the combined series computed by Spark."""
    sizing._check(req)
    counters = select(wh, req.selector)
    how = sizing.choose_combine(counters, req.combine)
    ids = [c.counter_id for c in counters]
    lo, hi = user_range(wh, ids, req.start, req.end)
    grid = grid_for(lo, hi, parse_duration(req.bucket))
    series = combined(spark, wh, ids, grid, how)
    mask, window_label = sizing.select_window(series, wh.zone, req)
    x = series.values[mask]
    x = x[np.isfinite(x)]
    if len(x) == 0:
        raise WarehouseError("no samples of the selected counters fall in the window and days chosen")
    s = bounds.size(x, req.coverage, confidence=req.confidence, capacity=req.capacity)
    kept = np.flatnonzero(mask & np.isfinite(series.values))
    result = {
        "selector": req.selector, "counters": len(counters), "unit": counters[0].unit,
        **asdict(s), "confidence": req.confidence, "window": window_label,
        "busiest_hours": req.busiest_hours if req.window == "busiest-hours" else None,
        "days": req.days or "mon-sun", "combine": how, "bucket_seconds": grid.bucket_seconds,
        "first_ts": sizing._stamp(grid.times[kept[0]], wh.zone), "last_ts": sizing._stamp(grid.times[kept[-1]], wh.zone),
    }
    result["cautions"] = sizing.cautions(series, mask, s, wh.zone)
    return {k: result.get(k) for k in sizing.KEYS}


def refuse(req: CorrelateRequest) -> None:
    """What the Spark engine does not do (checked before a session is started)."""
    duck_correlate._check(req)
    if req.pairs:
        raise WarehouseError("--pairs runs on the duckdb engine only: drop --engine spark")
    if req.rhythm == "remove":
        raise WarehouseError("--rhythm remove runs on the duckdb engine only: drop --engine spark, or keep the rhythm")


def correlate_target(wh: Warehouse, req: CorrelateRequest, spark: Any) -> dict[str, Any]:
    """warehouse.correlate.correlate_target, with the target series, the ranks, the per-lag
    co-moments and the counters' lag-1 autocorrelations computed by Spark. The target is small
    (one value per bucket): it is ranked and its autocorrelation taken on the driver."""
    refuse(req)
    targets = select(wh, req.target or "")
    tids = [c.counter_id for c in targets]
    lo, hi = user_range(wh, tids, req.start, req.end)
    grid = grid_for(lo, hi, parse_duration(req.bucket))
    raw = target_series(spark, wh, tids, grid)
    if np.isfinite(raw).sum() < req.min_overlap:
        raise WarehouseError(f"the target has fewer than {req.min_overlap} buckets with samples in the range")
    spearman = req.method == "spearman"
    y = cs.rank_columns(raw) if spearman else raw
    r1y = float(cs.lag1_autocorrelation(y[:, None])[0])
    ids = duck_correlate._against(wh, req, set(tids))
    got = target_correlations(spark, wh, y, ids, grid, spearman=spearman, max_lag=req.max_lag)
    r = np.where(got.n >= req.min_overlap, got.r, np.nan)
    n_eff = cs.bretherton_n_eff(got.n, got.r1[None, :], r1y)
    p = cs.p_values(r, n_eff)
    q = cs.bh_qvalues(p)
    valid = np.isfinite(r).any(axis=0)
    if not valid.any():
        raise WarehouseError(f"no counter shares at least {req.min_overlap} non-constant buckets with the target"
                             " in the range: widen --from/--to or --against, or lower --min-overlap")
    best = np.nanargmax(np.where(np.isfinite(r), np.abs(r), -1), axis=0)
    found = [{"counter_id": ids[j], "r": float(r[b, j]), "lag": int(got.lags[b]), "n": int(got.n[b, j]),
              "n_effective": float(n_eff[b, j]), "p": float(p[b, j]), "q": float(q[b, j])}
             for j, b in ((j, best[j]) for j in np.flatnonzero(valid))]
    found.sort(key=lambda row: -abs(row["r"]))
    keys = duck_correlate._keys(wh, [row["counter_id"] for row in found[:req.top]])
    results = [{"key": keys[row["counter_id"]], **{k: row[k] for k in ("r", "lag", "n", "n_effective", "p", "q")}}
               for row in found[:req.top]]
    return {
        "target": req.target, "target_counters": len(tids), "method": req.method,
        "bucket_seconds": grid.bucket_seconds, "max_lag": req.max_lag, "rhythm": req.rhythm, "fdr": req.fdr,
        "tested": int(np.isfinite(p).sum()), "counters_tested": len(found), "skipped": int((~valid).sum()),
        "passing": int(sum(1 for row in found if row["q"] < req.fdr)),
        "results": results, "lag_convention": LAG_NOTE, "cautions": duck_correlate._cautions(raw, grid),
    }
