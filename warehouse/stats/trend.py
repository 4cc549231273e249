"""A robust straight line through a short series (Theil-Sen) and when it crosses a level.

The slope is the median of the slopes between every pair of points (Theil 1950, Sen 1968); its
confidence interval is Sen's (1968, eq. 2.6): order statistics of those pairwise slopes picked with
the normal approximation of Kendall's statistic, with the tie correction for repeated x and y.
The intercept is median(y) - slope * median(x), so every line of the interval pivots about the
point (median x, median y); the crossing interval below uses that pivot too.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np


@dataclass(frozen=True)
class Line:
    slope: float
    intercept: float
    slope_low: float
    slope_high: float
    pivot_x: float
    pivot_y: float
    confidence: float
    n: int

    def at(self, x: float, slope: float | None = None) -> float:
        """The fitted value at x (on the line of `slope` through the pivot, when given)."""
        b = self.slope if slope is None else slope
        return self.pivot_y + b * (x - self.pivot_x)


def _tie_term(values: np.ndarray) -> float:
    _, counts = np.unique(values, return_counts=True)
    k = counts[counts > 1].astype(float)
    return float(np.sum(k * (k - 1) * (2 * k + 5)))


def theil_sen(x: np.ndarray, y: np.ndarray, confidence: float = 0.9) -> Line:
    """Median pairwise slope, its Sen confidence interval and the median-pivot intercept."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError("x and y must be 1-D arrays of the same length")
    if len(x) < 2:
        raise ValueError("a line needs at least two points")
    dx = x[:, None] - x[None, :]
    dy = y[:, None] - y[None, :]
    upper = dx > 0
    slopes = np.sort(dy[upper] / dx[upper])
    if slopes.size == 0:
        raise ValueError("all x are equal: no slope")
    slope = float(np.median(slopes))
    intercept = float(np.median(y) - slope * np.median(x))
    low, high = _sen_interval(slopes, x, y, confidence)
    return Line(slope, intercept, low, high, float(np.median(x)), float(np.median(y)), confidence, len(x))


def _sen_interval(slopes: np.ndarray, x: np.ndarray, y: np.ndarray, confidence: float) -> tuple[float, float]:
    """Sen (1968) eq. 2.6: the variance of Kendall's S with ties, then two order statistics."""
    z = NormalDist().inv_cdf((1 + confidence) / 2)
    n = len(y)
    var_s = (n * (n - 1) * (2 * n + 5) - _tie_term(x) - _tie_term(y)) / 18.0
    if var_s <= 0:
        return math.nan, math.nan
    half = z * math.sqrt(var_s)
    total = len(slopes)
    upper = min(int(np.round((total + half) / 2.0)), total - 1)
    lower = max(int(np.round((total - half) / 2.0)) - 1, 0)
    return float(slopes[lower]), float(slopes[upper])


@dataclass(frozen=True)
class Crossing:
    """When the line reaches `level`: x on the fitted line, and the earliest / latest x over the
    slope interval. `status` is 'ahead', 'already' (the fitted line is at or above the level at
    `now`), or 'not_within' (the fitted line does not reach it by `now + horizon`)."""
    status: str
    x: float | None
    x_early: float | None
    x_late: float | None


def crossing(line: Line, level: float, now: float, horizon: float) -> Crossing:
    """Where each line of the interval (all through the pivot) reaches `level`, within the horizon."""
    if line.at(now) >= level:
        return Crossing("already", None, None, None)
    limit = now + horizon

    def reach(b: float) -> float | None:
        if not np.isfinite(b) or b <= 0:
            return None
        x = line.pivot_x + (level - line.pivot_y) / b
        return x if x <= limit else None

    central = reach(line.slope)
    if central is None:
        return Crossing("not_within", None, reach(line.slope_high), None)
    return Crossing("ahead", central, reach(line.slope_high), reach(line.slope_low))
