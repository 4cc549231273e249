"""`warehouse changes`: which counters moved in this period, measured against their own history?

Every counter's statistics for the chosen period and the N comparable periods before it (see
timeutil.period_before) come from the rollup tables where those hold complete, current rows for
a period, and otherwise from one grouped query over the points. The period mean is scored
against the history's period means (median / MAD, stats/compare.history_score); q-values are
Benjamini-Hochberg over every counter scored. Counters without enough history, and counters with
history but no samples in the period, are listed apart.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from warehouse.catalog import match_counters
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.stats.compare import history_score
from warehouse.stats.correlate import bh_qvalues
from warehouse.timeutil import Period, local_datetime, parse_period, period_before, parse_when

KEYS = ("period", "start", "end", "history", "history_periods", "history_labels", "selector", "counters_scored",
        "passing", "fdr", "sources", "results", "new", "silent", "cautions")
ROW_KEYS = ("key", "unit", "score", "direction", "mean", "history_mean", "change", "change_pct", "p95",
            "history_p95", "n", "history_n", "p", "q", "note")
ROLLUP_TABLE = {"week": "rollup_week", "day": "rollup_day", "month": "rollup_month"}
MIN_HISTORY = 2
STAT_COLUMNS = ("n", "mean", "sd", "p95")
ALWAYS = "A departure from a counter's own history says what moved, not why: check what changed around then."


@dataclass(frozen=True)
class ChangesRequest:
    period: str | None = None
    start: str | None = None
    end: str | None = None
    history: int = 8
    top: int = 30
    selector: str | None = None
    fdr: float = 0.05


def chosen_period(wh: Warehouse, req: ChangesRequest) -> Period:
    """--period, or --from/--to; one of them is needed."""
    if req.period and (req.start or req.end):
        raise WarehouseError("give --period or --from/--to, not both")
    if req.period:
        return parse_period(req.period, wh.zone)
    if not (req.start and req.end):
        raise WarehouseError("give --period (e.g. 2026-W14) or both --from and --to")
    return parse_period(f"{req.start}..{req.end}", wh.zone)


def _ids(wh: Warehouse, selector: str | None) -> list[int] | None:
    return match_counters(wh, selector) if selector else None


# -- statistics per counter and period --------------------------------------------------------------

def raw_stats(wh: Warehouse, periods: list[Period], ids: list[int] | None) -> pd.DataFrame:
    """n, mean, population sd and linear p95 per (counter, period index), in one grouped query."""
    if not periods:
        return pd.DataFrame(columns=["counter_id", "k", *STAT_COLUMNS])
    where = "" if ids is None else " AND p.counter_id IN (SELECT unnest($ids::INTEGER[]))"
    params: dict[str, Any] = {"k": list(range(len(periods))), "a": [p.start_us for p in periods],
                              "b": [p.end_us for p in periods], "lo": min(p.start_us for p in periods),
                              "hi": max(p.end_us for p in periods)}
    if ids is not None:
        params["ids"] = ids
    return wh.con.execute(
        f"""WITH r AS (SELECT unnest($k::INTEGER[]) AS k, make_timestamptz(unnest($a::BIGINT[])) AS a,
                              make_timestamptz(unnest($b::BIGINT[])) AS b)
            SELECT p.counter_id, r.k, count(*) AS n, avg(p.value) AS mean, stddev_pop(p.value) AS sd,
                   quantile_cont(p.value, 0.95) AS p95
            FROM points p JOIN r ON p.ts >= r.a AND p.ts < r.b
            WHERE p.ts >= make_timestamptz($lo) AND p.ts < make_timestamptz($hi){where}
            GROUP BY ALL""", params).df()


def _rollup_ready(wh: Warehouse, kind: str) -> bool:
    """The rollup table exists and has taken in every loaded ingest (nothing due)."""
    table = ROLLUP_TABLE.get(kind)
    if table is None:
        return False
    tables = {r[0] for r in wh.con.execute("SELECT table_name FROM duckdb_tables()").fetchall()}
    if not {table, "rollup_seen"} <= tables:
        return False
    missing = wh.con.execute(
        "SELECT count(*) FROM ingests WHERE status = 'loaded' AND ingest_id NOT IN"
        " (SELECT ingest_id FROM rollup_seen WHERE period = $kind)", {"kind": kind}).fetchone()[0]
    return missing == 0


def rollup_stats(wh: Warehouse, periods: list[Period], kind: str, ids: list[int] | None) -> tuple[pd.DataFrame, set[int]]:
    """Statistics of the periods whose rollup rows are all complete, and which period indexes those are."""
    if not _rollup_ready(wh, kind):
        return pd.DataFrame(columns=["counter_id", "k", *STAT_COLUMNS]), set()
    starts = [local_datetime(p.start_us, wh.zone).date() for p in periods]
    where = "" if ids is None else " AND counter_id IN (SELECT unnest($ids::INTEGER[]))"
    params: dict[str, Any] = {"d": starts}
    if ids is not None:
        params["ids"] = ids
    frame = wh.con.execute(
        f"""SELECT counter_id, list_position($d::DATE[], period_start) - 1 AS k, n, mean, sd, p95, complete
            FROM {ROLLUP_TABLE[kind]} WHERE period_start IN (SELECT unnest($d::DATE[])){where}""", params).df()
    ok = frame.groupby("k")["complete"].all()
    covered = {int(k) for k, good in ok.items() if good}
    keep = frame[frame["k"].isin(covered)].drop(columns="complete")
    return keep, covered


def period_stats(wh: Warehouse, periods: list[Period], kind: str, ids: list[int] | None) -> tuple[pd.DataFrame, dict[str, int]]:
    """Rollups where complete and current, raw points for the rest; and how many periods each gave."""
    from_rollups, covered = rollup_stats(wh, periods, kind, ids)
    rest = [k for k in range(len(periods)) if k not in covered]
    raw = raw_stats(wh, [periods[k] for k in rest], ids)
    if len(raw):
        raw["k"] = np.asarray(rest)[raw["k"].to_numpy(dtype=np.int64)]
    frames = [f for f in (from_rollups, raw) if len(f)]
    stats = pd.concat(frames, ignore_index=True) if frames else raw
    return stats, {"rollup": len(covered), "points": len(rest)}


# -- scoring ----------------------------------------------------------------------------------------

def _score_counter(cur: pd.Series, hist: pd.DataFrame) -> dict[str, Any]:
    typical_n = float(hist["n"].median())
    floor = float(hist["sd"].median()) / math.sqrt(typical_n) if typical_n > 0 else 0.0
    s = history_score(float(cur["mean"]), hist["mean"].to_numpy(dtype=np.float64), floor=floor)
    change = float(cur["mean"]) - s.center
    note = ""
    if typical_n and abs(cur["n"] / typical_n - 1) > 0.05:
        note = f"{int(cur['n'])} samples against a usual {typical_n:.0f}: gaps or a changed interval move the mean too"
    return {"score": s.score, "direction": "up" if change > 0 else "down" if change < 0 else "same",
            "mean": float(cur["mean"]), "history_mean": s.center, "change": change,
            "change_pct": change / abs(s.center) * 100 if s.center else None, "p95": float(cur["p95"]),
            "history_p95": float(hist["p95"].median()), "n": int(cur["n"]), "history_n": int(typical_n),
            "p": s.p, "note": note}


def score_all(stats: pd.DataFrame, history: int) -> tuple[list[dict[str, Any]], list[int], list[int]]:
    """Scored rows (counter_id included), counters new in the period, and counters gone silent."""
    rows: list[dict[str, Any]] = []
    new: list[int] = []
    silent: list[int] = []
    for cid, group in stats.groupby("counter_id", sort=True):
        cur = group[group["k"] == 0]
        hist = group[(group["k"] > 0) & (group["n"] > 0)]
        if cur.empty:
            if len(hist):
                silent.append(int(cid))
            continue
        if len(hist) < MIN_HISTORY:
            new.append(int(cid))
            continue
        rows.append({"counter_id": int(cid), **_score_counter(cur.iloc[0], hist)})
    return rows, new, silent


def _keys(wh: Warehouse, ids: list[int]) -> dict[int, tuple[str, str]]:
    if not ids:
        return {}
    found = wh.con.execute("SELECT counter_id, key, unit FROM counters WHERE counter_id IN (SELECT unnest($i::INTEGER[]))",
                           {"i": ids}).fetchall()
    return {r[0]: (r[1], r[2]) for r in found}


def _check(req: ChangesRequest) -> None:
    if not MIN_HISTORY <= req.history <= 520:
        raise WarehouseError(f"--history must be {MIN_HISTORY}..520 periods, got {req.history}")
    if req.top < 1:
        raise WarehouseError(f"--top must be at least 1, got {req.top}")
    if not 0 < req.fdr < 1:
        raise WarehouseError(f"--fdr must be between 0 and 1 (exclusive), got {req.fdr}")


def find_changes(wh: Warehouse, req: ChangesRequest) -> dict[str, Any]:
    """Everything `warehouse changes` reports, with the stable keys of KEYS."""
    _check(req)
    period = chosen_period(wh, req)
    ids = _ids(wh, req.selector)
    periods = [period] + [period_before(period, k, wh.zone) for k in range(1, req.history + 1)]
    stats, sources = period_stats(wh, periods, period.kind, ids)
    stats = stats[stats["n"] > 0]
    if not (stats["k"] == 0).any():
        raise WarehouseError(f"no samples in the period {period.label}"
                             + (f" for {req.selector!r}" if req.selector else "") + ": nothing to compare")
    with_data = sorted(int(k) for k in stats["k"].unique() if k > 0)
    if len(with_data) < MIN_HISTORY:
        raise WarehouseError(f"history too short: {len(with_data)} of the {req.history} periods before {period.label}"
                             f" hold samples; at least {MIN_HISTORY} are needed (load earlier data, or choose a later period)")
    rows, new, silent = score_all(stats, req.history)
    q = bh_qvalues(np.array([r["p"] for r in rows])) if rows else np.array([])
    names = _keys(wh, [r["counter_id"] for r in rows] + new + silent)
    for row, qv in zip(rows, q):
        row["q"] = float(qv)
        row["key"], row["unit"] = names[row["counter_id"]]
    rows.sort(key=lambda r: (-abs(r["score"]), r["p"], r["key"]))
    result = {
        "period": period.label, "start": local_datetime(period.start_us, wh.zone),
        "end": local_datetime(period.end_us, wh.zone), "history": req.history, "history_periods": len(with_data),
        "history_labels": [periods[k].label for k in with_data], "selector": req.selector,
        "counters_scored": len(rows), "passing": int(sum(r["q"] < req.fdr for r in rows)), "fdr": req.fdr,
        "sources": sources, "results": [{k: r[k] for k in ROW_KEYS} for r in rows[:req.top]],
        "new": sorted(names[c][0] for c in new), "silent": sorted(names[c][0] for c in silent),
    }
    result["cautions"] = cautions(result, req)
    return {k: result[k] for k in KEYS}


def cautions(r: dict[str, Any], req: ChangesRequest) -> list[str]:
    out = []
    if r["history_periods"] < req.history:
        out.append(f"Only {r['history_periods']} of the {req.history} history periods asked for hold samples.")
    if r["history_periods"] < 6:
        out.append(f"With {r['history_periods']} history periods the p-values are weak (t with"
                   f" {r['history_periods'] - 1} degrees of freedom): rank by score, and trust q-values"
                   " only with a longer history.")
    if any(row["note"] for row in r["results"]):
        out.append("Some counters had a different number of samples than usual (see note): a gap or a changed"
                   " collection interval moves a period mean without any change in the system.")
    out.append(ALWAYS)
    return out
