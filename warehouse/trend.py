"""`warehouse trend`: the weekly series of a statistic, its growth per week and when it reaches capacity.

Per counter the series comes from the weekly rollup (rollup_week). With a combine rule the
selected counters become one series first (one-minute means per counter, summed, averaged or
maxed per minute) and its weekly statistic is computed from the points, since a percentile of a
sum cannot be had from the parts' rows.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, timedelta
from typing import Any

import numpy as np

from warehouse.catalog import match_counters
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.rollup import DEFAULT_COVERAGE, local_midnight, next_period, period_of
from warehouse.stats.trend import Line, crossing, theil_sen

STATS = ("p95", "bound", "mean", "max", "p50", "p99")
MIN_WEEKS = 3
LOW_COVERAGE = 0.9
COMBINE_BUCKET_S = 60
EXTRAPOLATES = ("The crossing extrapolates the fitted line beyond the data: it assumes the growth of these weeks"
                " continues unchanged. Projects, migrations and seasonal peaks break that; take the interval,"
                " not the single week, and fit again as weeks are added.")


@dataclass(frozen=True)
class TrendRequest:
    selector: str
    stat: str = "p95"
    capacity: float | None = None
    combine: str | None = None
    confidence: float = 0.9
    horizon_weeks: int = 52


def _check(req: TrendRequest) -> None:
    if req.stat not in STATS:
        raise WarehouseError(f"unknown statistic {req.stat!r}: use one of {', '.join(STATS)}")
    if not 0 < req.confidence < 1:
        raise WarehouseError(f"confidence must be between 0 and 1 (exclusive), got {req.confidence}")
    if req.horizon_weeks < 1:
        raise WarehouseError(f"the horizon must be at least 1 week, got {req.horizon_weeks}")
    if req.combine not in (None, "sum", "mean", "max"):
        raise WarehouseError(f"unknown combine {req.combine!r}: use sum, mean or max")


def _weekly_from_rollups(wh: Warehouse, ids: list[int], stat: str) -> dict[int, list[dict[str, Any]]]:
    rows = wh.con.execute(f"""
        SELECT counter_id, period_start, {stat} AS value, n, expected_n, complete FROM rollup_week
        WHERE counter_id IN (SELECT unnest(?::INTEGER[])) ORDER BY counter_id, period_start""", [ids]).fetchall()
    out: dict[int, list[dict[str, Any]]] = {}
    for cid, start, value, n, expected, complete in rows:
        out.setdefault(cid, []).append({"week": start, "value": value, "n": n, "expected_n": expected,
                                        "complete": complete})
    return out


_COMBINED_SQL = """
WITH b AS (
    SELECT counter_id, epoch_us(ts) // ($bucket * 1000000) AS k, avg(value) AS v FROM points
    WHERE counter_id IN (SELECT unnest($ids::INTEGER[])) GROUP BY ALL),
c AS (SELECT k, {how}(v) AS v FROM b GROUP BY k),
w AS (SELECT date_trunc('week', to_timestamp(k * $bucket))::DATE AS week, v FROM c)
SELECT week, avg(v) AS mean, max(v) AS max, quantile_cont(v, 0.5) AS p50, quantile_cont(v, 0.95) AS p95,
       quantile_cont(v, 0.99) AS p99, avg(v) + $k * stddev_pop(v) AS bound, count(*) AS n
FROM w GROUP BY week ORDER BY week"""


def _weekly_combined(wh: Warehouse, ids: list[int], stat: str, how: str) -> list[dict[str, Any]]:
    coverage = _coverage(wh)
    rows = wh.con.execute(_COMBINED_SQL.format(how={"sum": "sum", "mean": "avg", "max": "max"}[how]),
                          {"bucket": COMBINE_BUCKET_S, "ids": ids, "k": math.sqrt(coverage / (1 - coverage))}).fetchall()
    horizon = wh.con.execute("""SELECT max(i.last_ts) FROM ingests i JOIN counter_defs d USING (source_id)
        WHERE d.counter_id IN (SELECT unnest(?::INTEGER[]))""", [ids]).fetchone()[0]
    stats = ("mean", "max", "p50", "p95", "p99", "bound")
    out = []
    for week, *values, n in rows:
        end = local_midnight(next_period("week", week), wh.zone)
        seconds = (end - local_midnight(week, wh.zone)).total_seconds()
        out.append({"week": week, "value": dict(zip(stats, values))[stat], "n": n,
                    "expected_n": round(seconds / COMBINE_BUCKET_S),
                    "complete": horizon is not None and horizon + timedelta(seconds=COMBINE_BUCKET_S) >= end})
    return out


def _coverage(wh: Warehouse) -> float:
    row = wh.con.execute("SELECT value FROM settings WHERE name = 'rollup_coverage'").fetchone()
    return float(row[0]) if row else DEFAULT_COVERAGE


def _fit(weeks: list[dict[str, Any]], req: TrendRequest) -> dict[str, Any] | None:
    used = [w for w in weeks if w["complete"] and w["value"] is not None and math.isfinite(w["value"])]
    if len(used) < MIN_WEEKS:
        return None
    origin = used[0]["week"]
    x = np.array([(w["week"] - origin).days / 7.0 for w in used])
    y = np.array([w["value"] for w in used], dtype=float)
    line = theil_sen(x, y, req.confidence)
    fit = {"weeks_used": len(used), "first_week": origin, "last_week": used[-1]["week"],
           "slope_per_week": line.slope, "slope_low": line.slope_low, "slope_high": line.slope_high,
           "fitted_last": line.at(x[-1]), "crossing": None}
    if req.capacity is not None:
        fit["crossing"] = _crossing(line, origin, x[-1], req)
    return fit


def _week_at(origin: date, x: float | None) -> date | None:
    if x is None:
        return None
    return period_of("week", origin + timedelta(days=math.floor(x * 7)))


def _crossing(line: Line, origin: date, last_x: float, req: TrendRequest) -> dict[str, Any]:
    c = crossing(line, float(req.capacity or 0.0), last_x, float(req.horizon_weeks))
    return {"status": c.status, "week": _week_at(origin, c.x), "week_early": _week_at(origin, c.x_early),
            "week_late": _week_at(origin, c.x_late)}


def trend(wh: Warehouse, req: TrendRequest) -> dict[str, Any]:
    """Everything `warehouse trend` reports, with stable keys."""
    _check(req)
    ids = match_counters(wh, req.selector)
    info = {cid: (key, unit) for cid, key, unit in wh.con.execute(
        "SELECT counter_id, key, unit FROM counters WHERE counter_id IN (SELECT unnest(?::INTEGER[]))",
        [ids]).fetchall()}
    units = sorted({u for _, u in info.values()})
    if req.combine:
        if len(units) > 1:
            raise WarehouseError(f"the selector matches counters with different units ({', '.join(map(repr, units))}):"
                                 " narrow it before combining")
        series = [{"key": f"{req.combine} of {len(ids)} counter(s)", "unit": units[0] if units else "",
                   "weeks": _weekly_combined(wh, ids, req.stat, req.combine)}]
    else:
        weekly = _weekly_from_rollups(wh, ids, req.stat)
        if not weekly:
            raise WarehouseError(f"no weekly rollups for {req.selector!r}: run `warehouse rollup` first")
        series = [{"key": info[c][0], "unit": info[c][1], "weeks": weekly[c]} for c in ids if c in weekly]
    for s in series:
        s["fit"] = _fit(s["weeks"], req)
    return {"selector": req.selector, "stat": req.stat, "combine": req.combine, "confidence": req.confidence,
            "capacity": req.capacity, "horizon_weeks": req.horizon_weeks, "series": series,
            "cautions": _cautions(wh, series, req)}


def _cautions(wh: Warehouse, series: list[dict[str, Any]], req: TrendRequest) -> list[str]:
    out = []
    due = wh.con.execute("""SELECT count(*) FROM ingests WHERE first_ts IS NOT NULL AND ingest_id NOT IN
        (SELECT ingest_id FROM rollup_seen WHERE period = 'week')""").fetchone()[0]
    if due and not req.combine:
        out.append(f"{due} loaded file(s) are not in the weekly rollup yet: run `warehouse rollup --due` first")
    short = [s["key"] for s in series if s["fit"] is None]
    if short:
        out.append(f"fewer than {MIN_WEEKS} complete weeks, no line fitted: {', '.join(short[:5])}"
                   + (f" and {len(short) - 5} more" if len(short) > 5 else ""))
    thin = sum(1 for s in series for w in s["weeks"]
               if w["complete"] and w["expected_n"] and w["n"] < LOW_COVERAGE * w["expected_n"])
    if thin:
        out.append(f"{thin} week(s) hold less than {LOW_COVERAGE:.0%} of their expected samples; their"
                   f" {req.stat} may be off (open weeks are never fitted)")
    if req.capacity is not None:
        out.append(EXTRAPOLATES)
    return out
