"""Mergeable moments: count, mean, M2 (sum of squared deviations), min and max of parts of a sample.

Two parts merge with the parallel formulas of Chan, Golub and LeVeque (1979):
    n = na + nb,  d = mean_b - mean_a,  mean = mean_a + d * nb / n,  M2 = M2a + M2b + d^2 * na * nb / n
so weekly rows combine into a month or a quarter without going back to the points. Percentiles do
not merge this way; they are never combined from parts.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import reduce

import numpy as np


@dataclass(frozen=True)
class Moments:
    n: int
    mean: float
    m2: float
    min: float
    max: float

    @property
    def var_pop(self) -> float:
        return self.m2 / self.n if self.n else float("nan")

    @property
    def sd_pop(self) -> float:
        return float(np.sqrt(self.var_pop))

    @property
    def sd_sample(self) -> float:
        return float(np.sqrt(self.m2 / (self.n - 1))) if self.n > 1 else float("nan")


EMPTY = Moments(0, float("nan"), 0.0, float("inf"), float("-inf"))


def of(values: np.ndarray) -> Moments:
    """The moments of one array (NaN values ignored)."""
    x = np.asarray(values, dtype=float)
    x = x[~np.isnan(x)]
    if len(x) == 0:
        return EMPTY
    mean = float(x.mean())
    return Moments(len(x), mean, float(((x - mean) ** 2).sum()), float(x.min()), float(x.max()))


def merge(a: Moments, b: Moments) -> Moments:
    """Chan et al.'s pairwise update: the moments of the union of two disjoint parts."""
    if a.n == 0:
        return b
    if b.n == 0:
        return a
    n = a.n + b.n
    delta = b.mean - a.mean
    mean = a.mean + delta * b.n / n
    m2 = a.m2 + b.m2 + delta * delta * a.n * b.n / n
    return Moments(n, mean, m2, min(a.min, b.min), max(a.max, b.max))


def combine(n: np.ndarray, mean: np.ndarray, m2: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> Moments:
    """The moments of the union of many parts given as parallel arrays (empty parts skipped).

    Parts are merged pairwise in a balanced tree, which keeps the rounding error of M2 growing
    with log(parts) rather than with the number of parts.
    """
    parts = [Moments(int(k), float(m), float(s), float(a), float(b))
             for k, m, s, a, b in zip(n, mean, m2, lo, hi) if k > 0]
    while len(parts) > 1:
        pairs = [merge(parts[i], parts[i + 1]) for i in range(0, len(parts) - 1, 2)]
        parts = pairs + ([parts[-1]] if len(parts) % 2 else [])
    return parts[0] if parts else EMPTY


def combine_sequential(parts: list[Moments]) -> Moments:
    """The same union merged left to right (what a running update does)."""
    return reduce(merge, parts, EMPTY)
