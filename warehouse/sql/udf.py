"""Python functions callable from SQL on every connection (statistics over lists)."""
from __future__ import annotations

from collections.abc import Sequence

import duckdb
import numpy as np


def _finite(values: Sequence[float | None] | None) -> np.ndarray:
    arr = np.asarray([v for v in (values or []) if v is not None], dtype=np.float64)
    return arr[np.isfinite(arr)]


def quantile_ci(values: list[float | None] | None, p: float, confidence: float) -> dict[str, float | None]:
    """Empirical p-quantile with a moving-block bootstrap interval (seeded: same data, same interval)."""
    x = _finite(values)
    if len(x) == 0 or not 0 < p < 1 or not 0 < confidence < 1:
        return {"estimate": None, "low": None, "high": None}
    from warehouse.stats import bounds
    estimate, low, high = bounds.quantile_ci(x, p, confidence)
    return {"estimate": _num(estimate), "low": _num(low), "high": _num(high)}


def effective_n(values: list[float | None] | None) -> float | None:
    """Autocorrelation-adjusted sample size of a time-ordered list."""
    from warehouse.stats import bounds
    x = _finite(values)
    return float(bounds.effective_n(x)) if len(x) else None


def dominant_period(values: list[float | None] | None, bucket_seconds: float) -> float | None:
    """Seconds of the strongest periodic component that passes the test (p < 0.01), else NULL.

    NULLs in the list are missing buckets and keep their place on the grid."""
    from warehouse.stats import patterns
    x = np.asarray([np.nan if v is None else v for v in (values or [])], dtype=np.float64)
    if bucket_seconds is None or bucket_seconds <= 0 or np.isfinite(x).sum() < 8:
        return None
    try:
        found = patterns.find_periods(x, float(bucket_seconds), min_period=2.0 * bucket_seconds,
                                      max_period=len(x) * bucket_seconds / 2)
    except ValueError:
        return None
    return float(found[0].seconds) if found else None


def autocorrelation(values: list[float | None] | None, lag: int) -> float | None:
    """Autocorrelation at `lag` (the acf definition: full-series mean and denominator)."""
    from warehouse.stats import patterns
    x = _finite(values)
    if lag is None or lag < 0 or len(x) <= lag or np.ptp(x) == 0:
        return None
    return float(patterns.autocorrelation(x, int(lag)))


def _num(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def register(con: duckdb.DuckDBPyConnection) -> None:
    """Add the UDFs to `con` (documented in the README's SQL section)."""
    con.create_function("quantile_ci", quantile_ci, ["DOUBLE[]", "DOUBLE", "DOUBLE"],
                        "STRUCT(estimate DOUBLE, low DOUBLE, high DOUBLE)", null_handling="special")
    con.create_function("effective_n", effective_n, ["DOUBLE[]"], "DOUBLE", null_handling="special")
    con.create_function("dominant_period", dominant_period, ["DOUBLE[]", "DOUBLE"], "DOUBLE", null_handling="special")
    con.create_function("autocorrelation", autocorrelation, ["DOUBLE[]", "BIGINT"], "DOUBLE", null_handling="special")
