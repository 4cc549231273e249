"""`warehouse correlate`: rank counters by how they move with a target, with lead/lag and FDR control.

Counters are read in blocks (time x counters), ranked for Spearman, and correlated with the
target through matrix products, so memory is bounded by the block and the time grid, not by how
many counters the warehouse holds.
"""
from __future__ import annotations

import tempfile
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from warehouse.catalog import match_counters
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.series import Grid, blocks, combine, grid_for, select, user_range
from warehouse.stats import correlate as cs
from warehouse.stats.rhythm import hour_of_week, remove_rhythm
from warehouse.timeutil import format_duration, parse_duration

CAUTION = ("Correlation is not causation: a suspect points where to look, not what caused the symptom."
           " Repeat on other periods before acting.")
LAG_NOTE = "lag +k: the counter moves k buckets BEFORE the target (it leads); -k: it follows."


@dataclass(frozen=True)
class CorrelateRequest:
    target: str | None
    against: str | None = None
    start: str | None = None
    end: str | None = None
    bucket: str = "1m"
    method: str = "spearman"
    max_lag: int = 0
    top: int = 25
    fdr: float = 0.05
    min_overlap: int = 30
    pairs: bool = False
    rhythm: str = "keep"


def _check(req: CorrelateRequest) -> None:
    if req.method not in {"spearman", "pearson"}:
        raise WarehouseError(f"unknown method {req.method!r}: use spearman or pearson")
    if req.max_lag < 0:
        raise WarehouseError("--max-lag must be 0 or more")
    if not 0 < req.fdr < 1:
        raise WarehouseError(f"--fdr must be between 0 and 1, got {req.fdr}")
    if req.rhythm not in {"keep", "remove"}:
        raise WarehouseError(f"unknown rhythm {req.rhythm!r}: use keep or remove")
    if req.top < 1 or req.min_overlap < 3:
        raise WarehouseError("--top must be at least 1 and --min-overlap at least 3")


def _range(wh: Warehouse, req: CorrelateRequest, ids: list[int]) -> tuple[int, int]:
    return user_range(wh, ids, req.start, req.end)


def _keys(wh: Warehouse, ids: list[int]) -> dict[int, str]:
    return dict(wh.con.execute("SELECT counter_id, key FROM counters WHERE counter_id IN (SELECT unnest(?::INTEGER[]))",
                               [ids]).fetchall())


def _against(wh: Warehouse, req: CorrelateRequest, exclude: set[int]) -> list[int]:
    if req.against:
        ids = match_counters(wh, req.against)
    else:
        ids = [r[0] for r in wh.con.execute("SELECT counter_id FROM counters ORDER BY counter_id").fetchall()]
    ids = sorted(set(ids) - exclude)
    if not ids:
        raise WarehouseError("no counters to correlate against: widen --against")
    return ids


def _slots(grid: Grid, zone: str) -> np.ndarray:
    local = pd.DatetimeIndex(pd.to_datetime(grid.times, unit="us", utc=True)).tz_convert(zone)
    return hour_of_week(local.day_of_week, local.hour)


def _prepare(values: np.ndarray, method: str, slots: np.ndarray | None) -> np.ndarray:
    if slots is not None:
        values = remove_rhythm(values, slots)
    return cs.rank_columns(values) if method == "spearman" else values


def correlate_target(wh: Warehouse, req: CorrelateRequest) -> dict[str, Any]:
    """Target-vs-all: every against counter at every lag, best lag reported, BH over all tests."""
    _check(req)
    targets = select(wh, req.target or "")
    tids = [c.counter_id for c in targets]
    lo, hi = _range(wh, req, tids)
    grid = grid_for(lo, hi, parse_duration(req.bucket))
    target = combine(wh, tids, grid, "sum")
    if np.isfinite(target.values).sum() < req.min_overlap:
        raise WarehouseError(f"the target has fewer than {req.min_overlap} buckets with samples in the range")
    slots = _slots(grid, wh.zone) if req.rhythm == "remove" else None
    y = _prepare(target.values[:, None], req.method, slots)[:, 0]
    r1y = float(cs.lag1_autocorrelation(y[:, None])[0])
    ids = _against(wh, req, set(tids))
    found: list[dict[str, Any]] = []
    all_p: list[np.ndarray] = []
    skipped = 0
    for part, block in blocks(wh, ids, grid):
        X = _prepare(block, req.method, slots)
        del block                   # the ranks replace the means (the next block is being read)
        lagged = cs.lagged_corr(y, X, req.max_lag)
        r = np.where(lagged.n >= req.min_overlap, lagged.r, np.nan)
        n_eff = cs.bretherton_n_eff(lagged.n, cs.lag1_autocorrelation(X)[None, :], r1y)
        del X
        p = cs.p_values(r, n_eff)
        all_p.append(p.ravel())
        valid = np.isfinite(r).any(axis=0)
        skipped += int((~valid).sum())
        best = np.nanargmax(np.where(np.isfinite(r), np.abs(r), -1), axis=0)
        for j in np.flatnonzero(valid):
            b = best[j]
            found.append({"counter_id": part[j], "r": float(r[b, j]), "lag": int(lagged.lags[b]),
                          "n": int(lagged.n[b, j]), "n_effective": float(n_eff[b, j]), "p": float(p[b, j]),
                          "_flat": (len(all_p) - 1, b * len(part) + j)})
    if not found:
        raise WarehouseError(f"no counter shares at least {req.min_overlap} non-constant buckets with the target"
                             " in the range: widen --from/--to or --against, or lower --min-overlap")
    flat_p = np.concatenate(all_p) if all_p else np.zeros(0)
    q_all = cs.bh_qvalues(flat_p)
    offsets = np.cumsum([0] + [len(a) for a in all_p])
    for row in found:
        chunk, pos = row.pop("_flat")
        row["q"] = float(q_all[offsets[chunk] + pos])
    found.sort(key=lambda row: -abs(row["r"]))
    keys = _keys(wh, [row["counter_id"] for row in found[:req.top]])
    results = [{"key": keys[row["counter_id"]], **{k: row[k] for k in ("r", "lag", "n", "n_effective", "p", "q")}}
               for row in found[:req.top]]
    tested = int(np.isfinite(flat_p).sum())
    return {
        "target": req.target, "target_counters": len(tids), "method": req.method,
        "bucket_seconds": grid.bucket_seconds, "max_lag": req.max_lag, "rhythm": req.rhythm, "fdr": req.fdr,
        "tested": tested, "counters_tested": len(found), "skipped": skipped,
        "passing": int(sum(1 for row in found if row["q"] < req.fdr)),
        "results": results, "lag_convention": LAG_NOTE, "cautions": _cautions(target.values, grid),
    }


def _cautions(y: np.ndarray, grid: Grid) -> list[str]:
    out = []
    have = np.isfinite(y)
    first, last = np.flatnonzero(have)[[0, -1]]
    missing = 1 - have[first:last + 1].mean()
    if missing > 0.5:
        out.append(f"{missing:.0%} of the target's buckets are empty: is --bucket ({format_duration(grid.bucket_seconds)})"
                   " shorter than the sampling interval?")
    out.append(CAUTION)
    return out


def correlate_pairs(wh: Warehouse, req: CorrelateRequest) -> dict[str, Any]:
    """The strongest pairs among the against counters (lag 0), BH over every pair tested."""
    _check(req)
    ids = _against(wh, req, set())   # sorted by counter id, the order blocks() yields
    if len(ids) < 2:
        raise WarehouseError("--pairs needs at least two counters")
    lo, hi = _range(wh, req, ids)
    grid = grid_for(lo, hi, parse_duration(req.bucket))
    slots = _slots(grid, wh.zone) if req.rhythm == "remove" else None
    with tempfile.TemporaryDirectory(prefix="warehouse-pairs-") as tmp:
        matrix = np.lib.format.open_memmap(f"{tmp}/x.npy", mode="w+", dtype=np.float64, shape=(grid.n, len(ids)))
        start = 0
        for part, block in blocks(wh, ids, grid):   # blocks come in increasing id, like `ids`
            matrix[:, start:start + len(part)] = _prepare(block, req.method, slots)
            start += len(part)
        scan = cs.top_pairs(matrix, req.top, min_overlap=req.min_overlap)
        pairs, tested = scan.pairs, scan.tested
        r1 = cs.lag1_autocorrelation(matrix)
        del matrix
    keys = _keys(wh, ids)
    rows = []
    for pair in pairs:
        n_eff = cs.bretherton_n_eff(np.array([pair.n]), np.array([r1[pair.i]]), float(r1[pair.j]))
        rows.append({"a": keys[ids[pair.i]], "b": keys[ids[pair.j]], "r": pair.r, "lag": 0, "n": pair.n,
                     "p": float(cs.p_values(np.array([pair.r]), n_eff)[0])})
    # Only the strongest pairs are kept, so their Benjamini-Hochberg q-values over all `tested`
    # pairs are computed from the kept p-values alone: min over the kept ranks of p * tested / rank.
    # Dropping the other pairs can only remove terms from that minimum, so each q is an upper bound
    # of the exact BH value: conservative, never optimistic.
    _bh_over_kept(rows, tested)
    rows.sort(key=lambda row: -abs(row["r"]))
    return {"against": req.against or "*", "method": req.method, "bucket_seconds": grid.bucket_seconds,
            "max_lag": 0, "rhythm": req.rhythm, "tested": tested, "counters": len(ids),
            "pairs": [{k: row[k] for k in ("a", "b", "r", "lag", "n", "q")} for row in rows],
            "cautions": [CAUTION]}


def _bh_over_kept(rows: list[dict[str, Any]], tested: int) -> None:
    order = sorted(range(len(rows)), key=lambda i: rows[i]["p"])
    running = 1.0
    for rank in range(len(order), 0, -1):
        row = rows[order[rank - 1]]
        running = min(running, row["p"] * tested / rank)
        row["q"] = min(1.0, running)
