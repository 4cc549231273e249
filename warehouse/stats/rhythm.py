"""Remove the calendar rhythm (hour-of-week profile) from aligned series.

Counters in an office share the daily and weekly rhythm, so raw correlations mostly say "busy in
the day". Subtracting each series' own hour-of-week median leaves the departures from normal,
which is what moves with an intermittent symptom.
"""
from __future__ import annotations

import warnings

import numpy as np

HOURS_PER_WEEK = 168


def hour_of_week(local_weekday: np.ndarray, local_hour: np.ndarray) -> np.ndarray:
    """Slot 0..167: Monday 00:00-00:59 is 0, Sunday 23:00-23:59 is 167."""
    return np.asarray(local_weekday, dtype=np.int64) * 24 + np.asarray(local_hour, dtype=np.int64)


def remove_rhythm(X: np.ndarray, slot: np.ndarray) -> np.ndarray:
    """X (n, m) minus, per column, the median of its values in the same hour-of-week slot (NaN kept)."""
    out = np.array(X, dtype=np.float64, copy=True)
    order = np.argsort(slot, kind="stable")
    bounds = np.searchsorted(slot[order], np.arange(HOURS_PER_WEEK + 1))
    for s in range(HOURS_PER_WEEK):
        rows = order[bounds[s]:bounds[s + 1]]
        if len(rows) == 0:
            continue
        part = out[rows]
        have = ~np.isnan(part)
        if not have.any():
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns: median NaN, handled below
            median = np.nanmedian(part, axis=0)
        out[rows] = part - np.where(np.isnan(median), 0.0, median)
    return out
