"""warehouse/stats/compare.py against scipy, brute force, published tables and the Nile series."""
from __future__ import annotations

import itertools
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats
from scipy.signal import lfilter

from warehouse.stats import compare as C

REFERENCE = Path(__file__).parent / "reference"


def _pairs(seed: int, m: int, n: int, shift: float = 0.0, decimals: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x, y = rng.standard_normal(m), rng.standard_normal(n) + shift
    return (x, y) if decimals is None else (x.round(decimals), y.round(decimals))


# -- Mann-Whitney and Kolmogorov-Smirnov against scipy --------------------------------------------

@pytest.mark.parametrize("m,n,seed", [(3, 5, 1), (5, 7, 2), (8, 8, 3), (10, 10, 4), (6, 14, 5)])
def test_mann_whitney_exact_equals_scipy(m: int, n: int, seed: int) -> None:
    """Source: scipy.stats.mannwhitneyu(method="exact"), independent continuous data (no ties)."""
    x, y = _pairs(seed, m, n, shift=0.7)
    ours = C.mann_whitney(x, y, method="exact")
    ref = stats.mannwhitneyu(x, y, method="exact")
    assert ours.u == ref.statistic
    assert ours.p == pytest.approx(ref.pvalue, rel=1e-12)


@pytest.mark.parametrize("m,n,decimals,shift", [(300, 250, 1, 0.2), (1000, 1200, None, 0.05), (40, 60, 0, 0.0)])
def test_mann_whitney_asymptotic_equals_scipy_with_ties(m: int, n: int, decimals: int | None, shift: float) -> None:
    """Source: scipy.stats.mannwhitneyu(method="asymptotic"): tie-corrected normal approximation
    with continuity correction; rounded data make many ties."""
    x, y = _pairs(11, m, n, shift, decimals)
    ours = C.mann_whitney(x, y, method="asymptotic")
    ref = stats.mannwhitneyu(x, y, method="asymptotic")
    assert ours.u == ref.statistic
    assert ours.p == pytest.approx(ref.pvalue, rel=1e-10)


@pytest.mark.parametrize("m,n,decimals", [(300, 250, 1), (2000, 1500, None), (50, 80, 0)])
def test_ks_equals_scipy(m: int, n: int, decimals: int | None) -> None:
    """Source: scipy.stats.ks_2samp(method="asymp"): same D, same Smirnov p-value."""
    x, y = _pairs(12, m, n, 0.15, decimals)
    ours = C.ks_two_sample(x, y)
    ref = stats.ks_2samp(x, y, method="asymp")
    assert ours.d == pytest.approx(ref.statistic, abs=1e-15)
    assert ours.p == pytest.approx(ref.pvalue, rel=1e-10)


def test_exact_null_distribution_by_enumeration_and_scipy() -> None:
    """Counts of U: brute-force enumeration of every rank arrangement (m=4, n=5), the total
    C(m+n, m), and scipy's exact p-values for every U (m=6, n=7)."""
    counts = C.mw_null_counts(4, 5)
    brute = np.zeros(21, dtype=int)
    for chosen in itertools.combinations(range(9), 4):      # ranks of the first sample
        brute[sum(chosen) - 6] += 1                           # U = rank sum - m(m-1)/2 with ranks 0..8
    assert [int(c) for c in counts] == brute.tolist()
    assert sum(int(c) for c in C.mw_null_counts(10, 12)) == math.comb(22, 10)
    cdf = C.mw_exact_cdf(6, 7)
    for u in range(0, 43):
        upper = u if u > 21 else 42 - u                        # scipy reports 2 P(U >= max(U1, U2))
        want = stats.mannwhitneyu(*_with_u(6, 7, u), method="exact").pvalue
        assert min(1.0, 2 * (1 - cdf[upper - 1])) == pytest.approx(want, rel=1e-12)


def _with_u(m: int, n: int, u: int) -> tuple[np.ndarray, np.ndarray]:
    """Samples whose U (of the first) is exactly u: the first sample's values interleave the second's."""
    y = np.arange(n, dtype=float)
    x = np.full(m, -1.0)
    left = u
    for i in range(m):                       # each x above `take` of the y values
        take = min(n, left)
        x[i] = take - 0.5
        left -= take
    assert left == 0
    return x, y


# -- Hodges-Lehmann -----------------------------------------------------------------------------------

@pytest.mark.parametrize("m,n,decimals", [(7, 9, None), (40, 31, None), (60, 80, 0), (500, 400, 1)])
def test_hodges_lehmann_is_median_of_pairwise_differences(m: int, n: int, decimals: int | None) -> None:
    """Hodges & Lehmann (1963): the median of all y_j - x_i, here by brute force (numpy.median of
    the full matrix), both by listing and by the selection path (forced with enumerate_below)."""
    x, y = _pairs(21, m, n, 0.3, decimals)
    brute = float(np.median(np.subtract.outer(y, x)))
    assert C.hodges_lehmann(x, y) == brute
    assert C.hodges_lehmann(x, y, enumerate_below=16) == brute


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(-20, 20), min_size=1, max_size=40), st.lists(st.integers(-20, 20), min_size=1, max_size=40),
       st.integers(1, 10_000))
def test_selection_equals_sorting_for_any_order(xs: list[int], ys: list[int], pick: int) -> None:
    """Property: the k-th pairwise difference by selection equals the sorted brute-force list,
    with heavy ties (small integers)."""
    x, y = np.array(xs, float) / 4, np.array(ys, float) / 4
    d = np.sort(np.subtract.outer(y, x).ravel())
    k = 1 + pick % d.size
    assert C.pairwise_difference_order(x, y, [k], enumerate_below=3) == [d[k - 1]]


def test_selection_on_40000_by_40000_counts_right() -> None:
    """No brute force fits (1.6e9 pairs): check the defining property instead, by counting with
    numpy.searchsorted how many differences lie below and at the selected median."""
    x, y = _pairs(31, 40_000, 40_000, 0.1, 3)
    total = x.size * y.size
    k = total // 2
    (value,) = C.pairwise_difference_order(x, y, [k])
    xs = np.sort(x)
    # y - x < value  <=>  x > y - value;  y - x <= value  <=>  x >= y - value (up to rounding)
    below = int(np.sum(x.size - np.searchsorted(xs, y - value, side="right")))
    at_or_below = int(np.sum(x.size - np.searchsorted(xs, y - value, side="left")))
    assert below < k <= at_or_below


def test_critical_values_match_published_tables() -> None:
    """Two-sided alpha = 0.05 lower critical values of U from the usual Mann-Whitney tables
    (for example Siegel & Castellan 1988, table J; values from memory): (5,5) 2, (8,8) 13,
    (10,10) 23, (20,20) 127, (5,10) 8. C_alpha is one more."""
    for (m, n), table in {(5, 5): 2, (8, 8): 13, (10, 10): 23, (20, 20): 127, (5, 10): 8}.items():
        assert C.critical_count(m, n, 0.95, exact=True) - 1 == table, (m, n)
    # and the large-sample approximation of Hollander & Wolfe is within one of the exact value
    assert abs(C.critical_count(20, 20, 0.95, exact=False) - C.critical_count(20, 20, 0.95, exact=True)) <= 1


def test_shift_interval_worked_example() -> None:
    """Worked example: permeability constants of the human chorioamnion at term (x) and at 12-26
    weeks (y), Hollander & Wolfe (1973) p. 69, as reproduced in R's wilcox.test help (data from
    memory). The 95% interval for the shift is [D_(C), D_(mn+1-C)] over the 50 sorted differences
    with C = 8 + 1, 8 the tabled two-sided 0.05 critical value for samples of 5 and 10."""
    term = np.array([0.80, 0.83, 1.89, 1.04, 1.45, 1.38, 1.91, 1.64, 0.73, 1.46])
    early = np.array([1.15, 0.88, 0.90, 0.74, 1.21])
    d = np.sort(np.subtract.outer(term, early).ravel())       # term - early: shift of term against early
    s = C.shift_interval(early, term, 0.95)
    assert s.method == "exact" and s.rank_low == 9
    assert (s.low, s.high) == (d[8], d[41])
    assert s.estimate == float(np.median(d))
    assert s.low < s.estimate < s.high


def test_interval_coverage_on_independent_data() -> None:
    """The interval is distribution-free: on 300 seeded exponential samples (skewed, like latency)
    with a true shift of 0.5 the 90% interval covers it at least 85% of the time."""
    hits = 0
    for seed in range(300):
        rng = np.random.default_rng([5, seed])
        x, y = rng.exponential(size=30), rng.exponential(size=40) + 0.5
        s = C.shift_interval(x, y, 0.9)
        hits += s.low <= 0.5 <= s.high
    assert hits / 300 >= 0.85


# -- published data: the Nile -----------------------------------------------------------------------

def test_nile_shift_after_the_dam() -> None:
    """Nile flow at Aswan (tests/reference/timeseries/nile.csv; Cobb 1978): 1871-1897 against
    1899-1970. Published: the mean falls from about 1097.75 to 849.97, a shift of about -248. The
    Hodges-Lehmann shift (a median of differences, not a difference of means) must be near it,
    its interval must contain -248, and the drop must be significant with autocorrelation allowed for."""
    rows = np.loadtxt(REFERENCE / "timeseries" / "nile.csv", delimiter=",", skiprows=1)
    year, flow = rows[:, 0], rows[:, 1]
    before, after = flow[(year >= 1871) & (year <= 1897)], flow[year >= 1899]
    s = C.shift_interval(before, after, 0.95, autocorrelation=True)
    assert s.low < -248 < s.high
    assert s.estimate == pytest.approx(-248, rel=0.1)
    assert C.mann_whitney(before, after, autocorrelation=True).p < 1e-4


# -- autocorrelation ------------------------------------------------------------------------------------

def test_ar1_noise_without_change_rarely_significant() -> None:
    """200 seeded pairs of AR(1) periods (phi 0.8, 5000 samples each, independent pairs), no change:
    the autocorrelation-adjusted test (as `warehouse compare` runs it) reports p < 0.05 in at most
    8% of runs; the test that treats samples as independent reports far more."""
    adjusted = naive = 0
    for seed in range(200):
        rng = np.random.default_rng([7, seed])
        z = lfilter([1.0], [1.0, -0.8], rng.standard_normal(10_200))[200:]
        x, y = z[:5000], z[5000:]
        adjusted += C.mann_whitney(x, y, autocorrelation=True).p < 0.05
        naive += C.mann_whitney(x, y, method="asymptotic").p < 0.05
    message = f"adjusted {adjusted / 200:.1%} vs naive {naive / 200:.1%} of runs with p < 0.05"
    assert adjusted / 200 <= 0.08, message
    assert naive / 200 >= 0.3, message


# -- history scores -------------------------------------------------------------------------------------

def test_history_score_against_scipy() -> None:
    """Score = (value - median) / MAD scaled to a normal sd (scipy.stats.median_abs_deviation,
    scale="normal"); p = prediction-interval t with N - 1 df (scipy.stats.t)."""
    history = np.array([101.0, 97.5, 99.0, 103.2, 100.4, 98.8, 102.1, 99.9])
    s = C.history_score(108.0, history)
    mad = stats.median_abs_deviation(history, scale="normal")
    assert s.score == pytest.approx((108.0 - np.median(history)) / mad, rel=1e-3)   # 1.4826 vs 1/Phi^-1(3/4)
    t = abs(s.score) / math.sqrt(1 + 1 / 8)
    assert s.p == pytest.approx(2 * stats.t.sf(t, 7), rel=1e-10)
    assert C.history_score(100.0, np.array([100.0, 100.0]), floor=0.0).score == 0.0
    assert C.history_score(101.0, np.array([100.0, 100.0]), floor=0.5).score == pytest.approx(2.0)
    with pytest.raises(ValueError):
        C.history_score(1.0, np.array([1.0]))
