"""Two-period comparisons and departures from a counter's own history, as functions of arrays.

* Mann-Whitney U (Mann & Whitney 1947) with the usual normal approximation (tie-corrected, with
  continuity correction) or, for small samples without ties, the exact null distribution;
* the Hodges-Lehmann shift (Hodges & Lehmann 1963): the median of all pairwise differences
  after - before, found by selection without listing the n1 * n2 differences;
* its distribution-free interval: the order statistics of the pairwise differences at the
  Mann-Whitney critical value (Hollander & Wolfe, Nonparametric Statistical Methods, section 4.3;
  cited from memory);
* the two-sample Kolmogorov-Smirnov statistic with Smirnov's asymptotic p-value;
* robust scores of one period against N earlier ones (median / MAD), with a p-value.

Autocorrelation: consecutive counter samples are not independent, so every p-value and interval
can take effective sample sizes n (1 - r1) / (1 + r1) (r1 the lag-1 autocorrelation of each
sample's ranks, bounds.effective_n) in place of the counts. Inputs are 1-D and free of NaN.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from warehouse.stats.bounds import effective_n

# Differences listed outright below this many pairs (a float64 each), selected above it.
ENUMERATE_PAIRS = 2_000_000
# Exact Mann-Whitney null distribution up to this n1 * n2 (and only without ties).
EXACT_PAIRS = 2_500
MAD_TO_SD = 1.4826          # 1 / Phi^-1(3/4): MAD of a normal sample estimates 0.6745 sd


def _sample(x: np.ndarray, name: str) -> np.ndarray:
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1 or a.size == 0:
        raise ValueError(f"{name} must be a non-empty 1-D array")
    if not np.isfinite(a).all():
        raise ValueError(f"{name} must be finite (drop NaN first)")
    return a


# --------------------------------------------------------------------------- ranks


def average_ranks(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """1-based ranks with ties given their average rank, and the size of every tie group."""
    order = np.argsort(a, kind="mergesort")
    s = a[order]
    new = np.r_[True, s[1:] != s[:-1]]
    starts = np.flatnonzero(new)
    sizes = np.diff(np.r_[starts, s.size])
    mid = starts + (sizes + 1) / 2.0            # average of 1-based ranks start+1 .. start+size
    ranks = np.empty(a.size)
    ranks[order] = np.repeat(mid, sizes)
    return ranks, sizes


# --------------------------------------------------------------------------- Mann-Whitney


@dataclass(frozen=True)
class MannWhitney:
    u: float            # U of the first sample: #{x > y} + ties / 2
    p: float            # two-sided
    auc: float          # u / (n1 n2): the chance a first-sample value exceeds a second-sample one
    method: str         # "exact" or "asymptotic"
    n1_effective: float
    n2_effective: float


def mw_null_counts(m: int, n: int) -> np.ndarray:
    """How many of the C(m+n, m) rank arrangements give U = 0 .. m n (no ties), as exact integers.

    The generating function of U is the Gaussian binomial coefficient
    [m+n choose m]_q = prod_{i=1..m} (1 - q^(n+i)) / (1 - q^i); it is expanded here term by term
    with Python integers (numpy object arrays), so nothing is rounded.
    """
    size = m * n + 1
    c = np.zeros(size + max(m, n) + 1, dtype=object)
    c[:] = 0
    c[0] = 1
    for i in range(1, m + 1):
        a = n + i
        c[a:] = c[a:] - c[:-a]                  # times (1 - q^a)
        for r in range(i):                       # divided by (1 - q^i): cumulative sums of stride i
            c[r::i] = np.cumsum(c[r::i])
    return c[:size]


def mw_exact_cdf(m: int, n: int) -> np.ndarray:
    """P(U <= u) for u = 0 .. m n under the null hypothesis (continuous data, no ties)."""
    counts = mw_null_counts(m, n)
    total = math.comb(m + n, m)
    return np.array([float(v) for v in np.cumsum(counts)]) / float(total)


def _tie_term(sizes: np.ndarray) -> float:
    t = sizes.astype(np.float64)
    return float(np.sum(t ** 3 - t))


def _var_u(n1: float, n2: float, tie_term: float, n1e: float, n2e: float) -> float:
    """Variance of U: the tie-corrected null variance, scaled by the loss of information from
    autocorrelation: (1/n1' + 1/n2' + 1/(n1' n2')) / (1/n1 + 1/n2 + 1/(n1 n2)) with n' effective."""
    n = n1 + n2
    var = n1 * n2 / 12.0 * ((n + 1) - tie_term / (n * (n - 1))) if n > 1 else 0.0
    scale = ((n1e + n2e + 1) / (n1e * n2e)) / ((n1 + n2 + 1) / (n1 * n2))
    return var * scale


def rank_effective_sizes(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Effective sizes of both samples from the lag-1 autocorrelation of their ranks (in time order)."""
    ranks, _ = average_ranks(np.concatenate([x, y]))
    return effective_n(ranks[:x.size]), effective_n(ranks[x.size:])


def mann_whitney(x: np.ndarray, y: np.ndarray, *, method: str = "auto", autocorrelation: bool = False) -> MannWhitney:
    """Two-sided Mann-Whitney U test of x against y.

    method "exact" uses the exact null distribution (valid without ties; as scipy's "exact"),
    "asymptotic" the normal approximation with tie correction and continuity correction (as
    scipy's "asymptotic"), "auto" exact when there are no ties and n1 n2 <= EXACT_PAIRS.
    autocorrelation=True (asymptotic only) replaces n1, n2 in the variance by effective sizes
    from the lag-1 autocorrelation of each sample's ranks: the inputs must then be in time order.
    """
    x, y = _sample(x, "x"), _sample(y, "y")
    n1, n2 = x.size, y.size
    ranks, sizes = average_ranks(np.concatenate([x, y]))
    u1 = float(ranks[:n1].sum() - n1 * (n1 + 1) / 2.0)
    u = max(u1, n1 * n2 - u1)
    ties = bool((sizes > 1).any())
    if method == "auto":
        method = "exact" if not ties and not autocorrelation and n1 * n2 <= EXACT_PAIRS else "asymptotic"
    n1e, n2e = (effective_n(ranks[:n1]), effective_n(ranks[n1:])) if autocorrelation else (float(n1), float(n2))
    if method == "exact":
        cdf = mw_exact_cdf(n1, n2)
        k = int(round(u))
        p = 2.0 * (1.0 - cdf[k - 1]) if k >= 1 else 2.0
    elif method == "asymptotic":
        sd = math.sqrt(_var_u(n1, n2, _tie_term(sizes), n1e, n2e))
        z = (u - n1 * n2 / 2.0 - 0.5) / sd if sd > 0 else (math.inf if u > n1 * n2 / 2.0 else -math.inf)
        p = 2.0 * float(special.ndtr(-z))
    else:
        raise ValueError(f"unknown method {method!r}")
    return MannWhitney(u1, min(max(p, 0.0), 1.0), u1 / (n1 * n2), method, n1e, n2e)


# --------------------------------------------------------------------------- Kolmogorov-Smirnov


@dataclass(frozen=True)
class KolmogorovSmirnov:
    d: float
    p: float
    n_effective: float      # the en = n1' n2' / (n1' + n2') the p-value used


def ks_two_sample(x: np.ndarray, y: np.ndarray, *, n1_effective: float | None = None,
                  n2_effective: float | None = None) -> KolmogorovSmirnov:
    """D = max |F_x - F_y| over the pooled values, and Smirnov's asymptotic two-sided p-value
    P(D_en >= d) from the Kolmogorov distribution of order round(en), en = n1 n2 / (n1 + n2)
    (as scipy.stats.ks_2samp(method="asymp")); effective sizes, when given, replace n1 and n2."""
    from scipy.stats import kstwo
    xs, ys = np.sort(_sample(x, "x")), np.sort(_sample(y, "y"))
    pooled = np.concatenate([xs, ys])
    d = float(np.max(np.abs(np.searchsorted(xs, pooled, side="right") / xs.size
                            - np.searchsorted(ys, pooled, side="right") / ys.size)))
    m = float(n1_effective or xs.size)
    n = float(n2_effective or ys.size)
    en = m * n / (m + n)
    p = float(kstwo.sf(d, max(1, round(en))))
    return KolmogorovSmirnov(d, min(max(p, 0.0), 1.0), en)


# --------------------------------------------------------------------------- Hodges-Lehmann


def _boundaries(xd: np.ndarray, ys: np.ndarray, lo: np.ndarray, hi: np.ndarray, p: float,
                strict: bool) -> np.ndarray:
    """Per row j, the first column i in [lo_j, hi_j) with ys[j] - xd[i] >= p (strict) or > p.

    Rows are increasing because xd is sorted descending (float subtraction is monotone), so one
    binary search per row, all rows at once."""
    lo, hi = lo.copy(), hi.copy()
    last = xd.size - 1
    while True:
        active = lo < hi
        if not active.any():
            return lo
        mid = (lo + hi) // 2
        d = ys - xd[np.minimum(mid, last)]
        below = (d < p) if strict else (d <= p)
        lo = np.where(active & below, mid + 1, lo)
        hi = np.where(active & ~below, mid, hi)


def _candidates(xd: np.ndarray, ys: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                picks: np.ndarray | None = None) -> np.ndarray:
    """The differences in the rows' windows [lo_j, hi_j): all of them, or those at flat positions `picks`."""
    sizes = hi - lo
    ends = np.cumsum(sizes)
    flat = np.arange(int(ends[-1])) if picks is None else picks
    rows = np.searchsorted(ends, flat, side="right")
    cols = lo[rows] + flat - (ends[rows] - sizes[rows])
    return ys[rows] - xd[cols]


def _select(xd: np.ndarray, ys: np.ndarray, k: int, rng: np.random.Generator, enumerate_below: int) -> float:
    """The k-th smallest (1-based) of ys[j] - xd[i] over all pairs.

    Selection in the implicit sorted-rows matrix: sample differences from the remaining window,
    take two pivots that bracket the wanted rank in the sample (as in Floyd & Rivest's selection),
    count exactly how many differences lie below each with per-row binary searches, and narrow
    the window; once it holds at most `enumerate_below` differences they are listed and
    partitioned. Each round costs O(n2 log n1); a round typically keeps a few percent of the window.
    """
    lo = np.zeros(ys.size, dtype=np.int64)
    hi = np.full(ys.size, xd.size, dtype=np.int64)
    below = 0
    while True:
        total = int((hi - lo).sum())
        want = k - below
        if total <= enumerate_below:
            vals = _candidates(xd, ys, lo, hi)
            return float(np.partition(vals, want - 1)[want - 1])
        s = 4096
        sample = np.sort(_candidates(xd, ys, lo, hi, rng.integers(0, total, size=s)))
        f = want / total
        w = 3.0 * math.sqrt(f * (1 - f) / s) + 1.0 / s
        pa = float(sample[max(0, int(math.floor((f - w) * s)))])
        pb = float(sample[min(s - 1, int(math.ceil((f + w) * s)))])
        for pivot in (pa, pb):
            lt = _boundaries(xd, ys, lo, hi, pivot, strict=True)
            n_lt = int((lt - lo).sum())
            if want <= n_lt:
                hi = lt
                break
            le = _boundaries(xd, ys, lt, hi, pivot, strict=False)
            n_le = int((le - lo).sum())
            if want <= n_le:
                return pivot
            below += n_le
            want -= n_le
            lo = le


def pairwise_difference_order(x: np.ndarray, y: np.ndarray, ks: list[int], *,
                              enumerate_below: int = ENUMERATE_PAIRS, seed: int = 0) -> list[float]:
    """The ks-th smallest (1-based) of the n1 n2 differences y_j - x_i, exactly."""
    xd = np.sort(_sample(x, "x"))[::-1].copy()
    ys = np.sort(_sample(y, "y"))
    total = xd.size * ys.size
    for k in ks:
        if not 1 <= k <= total:
            raise ValueError(f"order {k} outside 1..{total}")
    if total <= enumerate_below:
        d = (ys[:, None] - xd[None, :]).ravel()
        part = np.partition(d, [k - 1 for k in ks])
        return [float(part[k - 1]) for k in ks]
    rng = np.random.default_rng(seed)
    return [_select(xd, ys, k, rng, enumerate_below) for k in ks]


def _median_orders(total: int) -> list[int]:
    return [(total + 1) // 2, total // 2 + 1]


def hodges_lehmann(x: np.ndarray, y: np.ndarray, *, enumerate_below: int = ENUMERATE_PAIRS) -> float:
    """The Hodges-Lehmann shift of y against x: the median of all differences y_j - x_i
    (the average of the two middle ones when n1 n2 is even, as numpy's median)."""
    a, b = pairwise_difference_order(x, y, _median_orders(np.size(x) * np.size(y)), enumerate_below=enumerate_below)
    return (a + b) / 2.0


def critical_count(n1: int, n2: int, confidence: float, *, tie_term: float = 0.0,
                   n1_effective: float | None = None, n2_effective: float | None = None,
                   exact: bool | None = None) -> int:
    """C_alpha: the rank of the pairwise difference that is the interval's lower end.

    Exact (no ties, small samples): C_alpha - 1 is the largest c with P(U <= c) <= alpha / 2, the
    lower critical value of the two-sided Mann-Whitney test at level alpha = 1 - confidence, as
    printed in the usual tables. Large samples: C_alpha = round(n1 n2 / 2 - z_(alpha/2) sd(U))
    (Hollander & Wolfe's large-sample approximation, from memory), with the tie-corrected and
    autocorrelation-scaled sd. At least 1: a confidence too high for the data gives the full range.
    """
    alpha = 1.0 - confidence
    if exact is None:
        exact = tie_term == 0 and n1_effective is None and n1 * n2 <= EXACT_PAIRS
    if exact:
        cdf = mw_exact_cdf(n1, n2)
        c = int(np.searchsorted(cdf, alpha / 2.0 * (1 + 1e-12), side="right")) - 1
        return max(c + 1, 1)
    n1e = n1_effective if n1_effective is not None else float(n1)
    n2e = n2_effective if n2_effective is not None else float(n2)
    sd = math.sqrt(_var_u(n1, n2, tie_term, n1e, n2e))
    z = float(special.ndtri(1.0 - alpha / 2.0))
    return max(int(round(n1 * n2 / 2.0 - z * sd)), 1)


@dataclass(frozen=True)
class Shift:
    estimate: float
    low: float
    high: float
    confidence: float
    rank_low: int           # C_alpha
    method: str             # "exact" or "normal"


def shift_interval(x: np.ndarray, y: np.ndarray, confidence: float = 0.95, *, autocorrelation: bool = False,
                   enumerate_below: int = ENUMERATE_PAIRS) -> Shift:
    """Hodges-Lehmann shift of y against x and its distribution-free interval
    [D_(C), D_(n1 n2 + 1 - C)] over the sorted pairwise differences D (Hollander & Wolfe 4.3).
    With autocorrelation=True (inputs in time order) C uses effective sample sizes."""
    x, y = _sample(x, "x"), _sample(y, "y")
    n1, n2 = x.size, y.size
    total = n1 * n2
    _, sizes = average_ranks(np.concatenate([x, y]))
    tie = _tie_term(sizes)
    eff = rank_effective_sizes(x, y) if autocorrelation else (None, None)
    exact = tie == 0 and not autocorrelation and total <= EXACT_PAIRS
    c = min(critical_count(n1, n2, confidence, tie_term=tie, n1_effective=eff[0], n2_effective=eff[1],
                           exact=exact), (total + 1) // 2)
    orders = _median_orders(total) + [c, total + 1 - c]
    m1, m2, low, high = pairwise_difference_order(x, y, orders, enumerate_below=enumerate_below)
    return Shift((m1 + m2) / 2.0, low, high, confidence, c, "exact" if exact else "normal")


# --------------------------------------------------------------------------- history scores


@dataclass(frozen=True)
class HistoryScore:
    center: float       # median of the history
    scale: float        # the spread the score divides by (1.4826 MAD, or the floor)
    score: float        # (value - center) / scale
    p: float            # two-sided
    periods: int


def history_score(value: float, history: np.ndarray, *, floor: float = 0.0) -> HistoryScore:
    """How far `value` lies from N earlier values of the same statistic, robustly.

    score = (value - median) / max(1.4826 MAD, floor): the MAD of a normal sample times 1.4826
    estimates its sd, and the median and MAD do not move when one earlier period was itself odd.
    The floor (for example the standard error of the period's own mean) keeps two nearly equal
    history values from making every difference look large. The p-value reads the score as the
    statistic of a prediction interval for one new value given N past ones:
    score / sqrt(1 + 1/N) against Student's t with N - 1 degrees of freedom (exact for normal
    periods with the sd in place of the MAD; with the MAD it is an approximation). Needs N >= 2.
    A zero scale (a constant history and floor) gives score 0 when the value equals it, else +-inf, p 0.
    """
    h = np.asarray(history, dtype=np.float64)
    h = h[np.isfinite(h)]
    if h.size < 2:
        raise ValueError("a history score needs at least two earlier values")
    center = float(np.median(h))
    scale = max(MAD_TO_SD * float(np.median(np.abs(h - center))), float(floor))
    diff = float(value) - center
    if scale == 0.0 or not math.isfinite(scale):
        score = 0.0 if diff == 0.0 else math.copysign(math.inf, diff)
    else:
        score = diff / scale
    if math.isinf(score):
        p = 0.0
    else:
        df = h.size - 1
        t = abs(score) / math.sqrt(1.0 + 1.0 / h.size)
        p = float(special.stdtr(df, -t)) * 2.0
    return HistoryScore(center, scale, score, min(p, 1.0), int(h.size))
