"""Sizing bounds: Cantelli/Chebyshev, accurate moments, quantiles and the moving-block bootstrap."""
from __future__ import annotations

import hashlib
import json
import math
import re
import tracemalloc
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st
from scipy.signal import lfilter
from scipy.stats import norm
from statsmodels.tsa.stattools import acf

import warehouse.stats.bounds as bounds
from warehouse.stats.bounds import (
    Sizing,
    block_length,
    cantelli_coverage,
    cantelli_k,
    chebyshev_coverage,
    chebyshev_k,
    effective_n,
    lag1_autocorrelation,
    quantile,
    quantile_ci,
    size,
)

REFERENCE = Path(__file__).parent / "reference"
NIST = REFERENCE / "nist-strd"
NIST_SETS = ["Lew", "Lottery", "Mavro", "Michelso", "NumAcc1", "NumAcc2", "NumAcc3", "NumAcc4", "PiDigits"]


# --------------------------------------------------------------------------- helpers


def _certified() -> dict[str, dict]:
    return json.loads((NIST / "certified.json").read_text(encoding="ascii"))["univariate"]


def _nist_data(name: str) -> np.ndarray:
    """Layout per tests/reference/SOURCES.md section 1.1: header lines 1-60, data from line 61."""
    lines = (NIST / f"{name}.dat").read_text(encoding="ascii").splitlines()
    declared = int(re.search(r"Number of Observations:\s*(\d+)", lines[44]).group(1))
    data = np.array([float(v) for v in lines[60:] if v.strip()], dtype=np.float64)
    assert data.size == declared
    return data


def _lre(computed: float, certified: float) -> float:
    """Log relative error, capped at 15 (the certified values carry 15 significant digits)."""
    if computed == certified:
        return 15.0
    return min(15.0, -math.log10(abs(computed - certified) / abs(certified)))


def _ar1(phi: float, n: int, rng: np.random.Generator, sigma: float = 1.0) -> np.ndarray:
    """Gaussian AR(1) x_t = phi x_{t-1} + e_t, started in its stationary distribution."""
    e = rng.standard_normal(n) * sigma
    e[0] /= math.sqrt(1.0 - phi * phi)
    return lfilter([1.0], [1.0, -phi], e)


# --------------------------------------------------------------------------- NIST StRD


def test_reference_copies_match_the_recorded_sha256() -> None:
    """Source: tests/reference/SOURCES.md (SHA-256 list in section 1): the copies are byte-for-byte."""
    text = (REFERENCE / "SOURCES.md").read_text(encoding="utf-8")
    recorded = dict((name, digest) for digest, name in re.findall(r"^([0-9a-f]{64})  (\S+\.dat)$", text, re.M))
    for name in NIST_SETS:
        digest = hashlib.sha256((NIST / f"{name}.dat").read_bytes()).hexdigest()
        assert recorded[f"{name}.dat"] == digest, name


def test_certified_json_agrees_with_the_dat_headers() -> None:
    """Source: NIST StRD univariate files, certified values on lines 41-43 (SOURCES.md 1.1)."""
    certified = _certified()
    for name in NIST_SETS:
        lines = (NIST / f"{name}.dat").read_text(encoding="ascii").splitlines()
        printed = [re.search(r":\s+(\S+)", lines[i]).group(1) for i in (40, 41, 42)]
        c = certified[name]["certified"]
        assert [float(v) for v in printed] == [c["mean"], c["s"], c["r1"]], name


# Which LRE each set reaches (mean / s / r(1)), measured with this implementation on float64:
#   Lew 15/15/14.8, Lottery 15/15/15, Mavro 15/13.1/13.7, Michelso 15/13.8/13.4,
#   NumAcc1 15/15/15, NumAcc2 15/15/15, NumAcc3 15/9.5/15, NumAcc4 15/8.3/15, PiDigits 15/15/14.9.
# s on Mavro, Michelso, NumAcc3 and NumAcc4 sits at the float64 ceiling recorded in SOURCES.md
# (exact arithmetic on the parsed doubles reaches no more).
_MIN_LRE_S = {name: 9.0 for name in NIST_SETS} | {"NumAcc4": 6.0}


@pytest.mark.parametrize("name", NIST_SETS)
def test_mean_and_sd_match_nist_certified_values(name: str) -> None:
    """Source: NIST StRD univariate summary statistics (certified mean ybar and sample sd s, n-1).

    Required: LRE >= 9 on the lower/average difficulty sets (and Michelso, whose file states none),
    >= 6 on NumAcc4 (higher difficulty). Reached: mean 15 on all nine; s 15 on Lew, Lottery,
    NumAcc1, NumAcc2, PiDigits; 13.1 Mavro; 13.8 Michelso; 9.5 NumAcc3; 8.3 NumAcc4.
    size() reports the population sd, converted here with sqrt(n / (n - 1)).
    """
    x = _nist_data(name)
    c = _certified()[name]["certified"]
    s = size(x)
    n = s.n
    sample_sd = s.sd * math.sqrt(n / (n - 1))
    assert _lre(s.mean, c["mean"]) >= 14.0
    assert _lre(sample_sd, c["s"]) >= _MIN_LRE_S[name]


@pytest.mark.parametrize("name", NIST_SETS)
def test_lag1_autocorrelation_matches_nist_r1(name: str) -> None:
    """Source: NIST StRD certified r(1) (definition in SOURCES.md 1.1, denominator the full sum of squares).

    Reached LRE: Lew 14.8, Lottery 15, Mavro 13.7, Michelso 13.4, NumAcc1-4 15, PiDigits 14.9.
    Required: 10 (the tolerance SOURCES.md gives as passing every float64 implementation on NumAcc4).
    """
    r1 = lag1_autocorrelation(_nist_data(name))
    assert _lre(r1, _certified()[name]["certified"]["r1"]) >= 10.0


# --------------------------------------------------------------------------- quantiles


_PROBS = [0.0, 1e-9, 0.01, 0.05, 0.1, 0.25, 1 / 3, 0.5, 0.9, 0.95, 0.975, 0.99, 0.999, 1.0]


@pytest.mark.parametrize("n", [1, 2, 3, 10, 101, 1000])
def test_quantile_equals_numpy_linear_on_random_and_heavy_tailed_data(n: int) -> None:
    """Source: numpy.quantile(method="linear") (Hyndman & Fan 1996 type 7) as the reference.

    Bit-for-bit equality on normal, Pareto (shape 1.1, infinite variance) and lognormal (sigma 2)
    samples, with ties from rounding.
    """
    rng = np.random.default_rng(n)
    samples = [
        rng.standard_normal(n),
        rng.pareto(1.1, n) + 1.0,
        rng.lognormal(0.0, 2.0, n),
        np.round(rng.lognormal(0.0, 1.0, n), 1),
    ]
    for x in samples:
        before = x.copy()
        for p in _PROBS:
            assert quantile(x, p) == float(np.quantile(x, p, method="linear")), (n, p)
        np.testing.assert_array_equal(x, before)  # the input is not reordered


@settings(max_examples=150, deadline=None)
@given(st.lists(st.floats(-1e100, 1e100), min_size=1, max_size=40), st.floats(0.0, 1.0))
def test_quantile_equals_numpy_linear_property(xs: list[float], p: float) -> None:
    """Source: numpy.quantile(method="linear") on arbitrary samples and probabilities."""
    x = np.array(xs)
    assert quantile(x, p) == float(np.quantile(x, p, method="linear"))


def test_quantile_rejects_bad_input() -> None:
    """Source: the documented contract (empty sample, p outside [0, 1])."""
    with pytest.raises(ValueError):
        quantile(np.array([]), 0.5)
    for p in (-0.01, 1.01, math.nan):
        with pytest.raises(ValueError):
            quantile(np.array([1.0, 2.0]), p)


# --------------------------------------------------------------------------- Cantelli / Chebyshev


def test_facts_of_the_trade() -> None:
    """Common practice (no source): two-sided Chebyshev covers 84% at k=2.5 and 36% at k=1.25;
    one-sided Cantelli covers about 86.2% at k=2.5."""
    assert chebyshev_coverage(2.5) == pytest.approx(0.84, abs=1e-12)
    assert chebyshev_coverage(1.25) == pytest.approx(0.36, abs=1e-12)
    assert cantelli_coverage(2.5) == pytest.approx(0.862, abs=5e-4)


def test_k_and_coverage_are_inverse() -> None:
    """Source: Cantelli k = sqrt(p/(1-p)) and Chebyshev k = 1/sqrt(1-p), inverted algebraically."""
    for p in (1e-6, 0.1, 0.5, 0.84, 0.9, 0.95, 0.99, 0.999999):
        assert cantelli_coverage(cantelli_k(p)) == pytest.approx(p, rel=1e-12)
        assert chebyshev_coverage(chebyshev_k(p)) == pytest.approx(p, rel=1e-9)
    assert cantelli_k(0.5) == 1.0
    assert chebyshev_k(0.75) == 2.0
    assert cantelli_coverage(0.0) == cantelli_coverage(-3.0) == 0.0
    assert chebyshev_coverage(1.0) == chebyshev_coverage(0.5) == chebyshev_coverage(-2.0) == 0.0


@pytest.mark.parametrize("fn", [cantelli_k, chebyshev_k])
@pytest.mark.parametrize("p", [0.0, 1.0, -0.5, 1.5, math.nan])
def test_k_rejects_p_outside_the_open_unit_interval(fn: Callable[[float], float], p: float) -> None:
    """Source: the documented contract (ValueError unless 0 < p < 1)."""
    with pytest.raises(ValueError):
        fn(p)


# --------------------------------------------------------------------------- size()


def _ulp_cluster(base: float, offsets: list[int]) -> list[float]:
    return [base + o * math.ulp(base) for o in offsets]


def _nudged_fraction(m: int, n: int, steps: int) -> float:
    p = m / n
    for _ in range(abs(steps)):
        p = math.nextafter(p, 1.0 if steps > 0 else 0.0)
    return p


_FINITE = st.floats(allow_nan=False, allow_infinity=False)
_SAMPLES = st.one_of(
    st.lists(_FINITE, min_size=1, max_size=30),  # anything, including huge ranges
    st.lists(st.floats(-1e6, 1e6), min_size=1, max_size=60),
    st.builds(lambda v, n: [v] * n, _FINITE, st.integers(1, 30)),  # constants
    st.lists(st.sampled_from([0.0, -1.0, 2.5, 1e-300, 1e300, -1.7e308, 1.7e308]), min_size=1, max_size=30),
    st.builds(_ulp_cluster, st.floats(-1e300, 1e300), st.lists(st.integers(0, 4), min_size=1, max_size=30)),
)
_COVERAGE = st.one_of(
    st.floats(0.0, 1.0, exclude_min=True, exclude_max=True),
    st.integers(2, 30)  # m/n give or take two ulps: where a sample's coverage steps
    .flatmap(lambda n: st.tuples(st.integers(1, n - 1), st.just(n), st.integers(-2, 2)))
    .map(lambda t: _nudged_fraction(*t)),
)

# A sample where mean + k*sd, rounded, falls below samples that the exact Cantelli bound covers:
# the mean 1e17 + 40 is not representable (spacing 16) and k*sd = 8 is lost in the rounding.
_ROUNDING_TRAP = [1e17 + 16, 1e17 + 48, 1e17 + 48, 1e17 + 48]
_ROUNDING_TRAP_P = math.nextafter(0.25, 1.0)


@settings(max_examples=200, deadline=None)
@given(_SAMPLES, _COVERAGE)
@example(_ROUNDING_TRAP, _ROUNDING_TRAP_P)
def test_cantelli_bound_covers_at_least_the_target(xs: list[float], p: float) -> None:
    """Source: Cantelli's inequality applied to the empirical distribution (ddof=0 variance):
    at least a fraction p of the samples lie at or below mean + sqrt(p/(1-p)) sd, for any sample.

    Checked on the computed numbers, with constants, duplicates, values near +/-1.7e308 and
    clusters a few ulps wide around large offsets, and p just above or below m/n.
    """
    x = np.array(xs, dtype=np.float64)
    s = size(x, p)
    assert s.coverage_observed >= p
    assert s.coverage_observed == np.count_nonzero(x <= s.bound) / x.size
    assert s.sd >= 0.0 and math.isfinite(s.sd)
    assert s.min <= s.mean <= s.max
    assert s.bound >= s.mean
    if x.size >= 2:
        assert s.min <= s.quantile_ci_low <= s.quantile_ci_high <= s.max


def test_the_rounding_trap_needs_the_safeguard() -> None:
    """Source: IEEE 754 double rounding. The plain float formula mean + k*sd misses the Cantelli
    guarantee on this sample; size() raises the bound to the order statistic that the exact
    bound is provably at or above (see bounds._cantelli_bound)."""
    x = np.array(_ROUNDING_TRAP)
    p = _ROUNDING_TRAP_P
    s = size(x, p)
    naive = s.mean + cantelli_k(p) * s.sd
    assert np.count_nonzero(x <= naive) / x.size < p
    assert s.bound == 1e17 + 48
    assert s.coverage_observed == 1.0


def test_size_fields_on_a_small_sample() -> None:
    """Source: hand computation. x = 1..10: mean 5.5, population variance 8.25, k(0.8) = 2,
    bound = 5.5 + 2*sqrt(8.25); capacity 10 -> 0 samples above, headroom (10 - bound)/10."""
    x = np.arange(1.0, 11.0)
    s = size(x, 0.8, capacity=10.0)
    assert isinstance(s, Sizing)
    assert (s.n, s.mean, s.min, s.max) == (10, 5.5, 1.0, 10.0)
    assert s.sd == pytest.approx(math.sqrt(8.25), rel=1e-15)
    assert s.k == 2.0
    assert s.bound == pytest.approx(5.5 + 2.0 * math.sqrt(8.25), rel=1e-15)
    assert s.coverage_observed == 1.0  # bound 11.24 is above every sample
    assert s.chebyshev_two_sided_coverage == 0.75
    assert s.p50 == 5.5
    assert (s.p95, s.p99) == (pytest.approx(9.55, rel=1e-15), pytest.approx(9.91, rel=1e-15))
    assert s.quantile_at_target == pytest.approx(8.2, rel=1e-15)
    assert s.capacity == 10.0 and s.above_capacity_fraction == 0.0
    assert s.headroom == pytest.approx((10.0 - s.bound) / 10.0, rel=1e-15) and s.headroom < 0
    t = size(x, 0.5, capacity=7.5)  # bound 5.5 + sqrt(8.25) = 8.37
    assert t.above_capacity_fraction == 0.3  # 8, 9, 10
    assert t.coverage_observed == 0.8
    assert size(x).capacity is None and size(x).headroom is None and size(x).above_capacity_fraction is None


def test_size_of_one_sample() -> None:
    """Source: the documented contract (n < 2: no interval)."""
    s = size(np.array([42.0]), 0.99)
    assert (s.n, s.mean, s.sd, s.bound, s.coverage_observed, s.n_effective) == (1, 42.0, 0.0, 42.0, 1.0, 1.0)
    assert s.quantile_at_target == 42.0
    assert math.isnan(s.quantile_ci_low) and math.isnan(s.quantile_ci_high)


@pytest.mark.parametrize(
    "x, kwargs",
    [
        (np.array([]), {}),
        (np.array([1.0, math.nan]), {}),
        (np.array([1.0, math.inf]), {}),
        (np.ones((2, 2)), {}),
        (np.array([1.0, 2.0]), {"coverage": 0.0}),
        (np.array([1.0, 2.0]), {"coverage": 1.0}),
        (np.array([1.0, 2.0]), {"capacity": 0.0}),
        (np.array([1.0, 2.0]), {"capacity": math.nan}),
    ],
)
def test_size_rejects_bad_input(x: np.ndarray, kwargs: dict) -> None:
    """Source: the documented contract (ValueError for empty, non-finite, bad coverage or capacity)."""
    with pytest.raises(ValueError):
        size(x, **kwargs)


# --------------------------------------------------------------------------- autocorrelation


def _statsmodels_effective_n(x: np.ndarray) -> float:
    r1 = float(acf(x, nlags=1, fft=False)[1]) if x.size >= 3 and np.ptp(x) > 0 else 0.0
    return min(float(x.size), max(1.0, x.size * (1.0 - r1) / (1.0 + r1)))


def test_effective_n_against_statsmodels_acf() -> None:
    """Source: statsmodels.tsa.stattools.acf at lag 1, n_eff = n (1 - r1) / (1 + r1) clipped to [1, n]."""
    rng = np.random.default_rng(7)
    series = [
        _ar1(0.5, 300, rng),
        _ar1(0.95, 2000, rng),
        _ar1(-0.4, 300, rng),  # negative r1: clipped to n
        rng.standard_normal(500),
        np.cumsum(rng.standard_normal(400)),  # close to a random walk
        _nist_data("Lew"),
        _nist_data("Mavro"),
        np.array([1.0, 2.0, 4.0]),
    ]
    for x in series:
        r_ref = float(acf(x, nlags=1, fft=False)[1])
        assert lag1_autocorrelation(x) == pytest.approx(r_ref, rel=1e-12, abs=1e-15)
        assert effective_n(x) == pytest.approx(_statsmodels_effective_n(x), rel=1e-10)
    assert 20 < effective_n(series[1]) < 100  # AR(1) with 0.95: about 2000 * 0.05 / 1.95 = 51
    for tiny in (np.array([]), np.array([3.0]), np.array([3.0, 5.0]), np.full(50, 2.5)):
        assert effective_n(tiny) == float(tiny.size)
        assert lag1_autocorrelation(tiny) == 0.0


def _politis_white_ar1(r: float, n: int) -> float:
    """b = (2 G^2 / D * n)^(1/3), G = sum |k| gamma(k), D = 4/3 (sum gamma(k))^2, gamma(k) = r^|k|,
    summed numerically over lags (the general form the closed form in block_length reduces to)."""
    k = np.arange(-5000, 5001)
    gamma = np.abs(r) ** np.abs(k)
    g_sum, big_g = float(np.sum(gamma)), float(np.sum(np.abs(k) * gamma))
    return (2.0 * big_g**2 / (4.0 / 3.0 * g_sum**2) * n) ** (1.0 / 3.0)


def test_block_length_is_the_ar1_plug_in_of_the_general_rule() -> None:
    """Source: Politis & White (2004) block length b = (2 G^2 / D n)^(1/3) with AR(1) autocovariances,
    r taken from statsmodels' acf at lag 1."""
    rng = np.random.default_rng(11)
    for phi, n in [(0.3, 500), (0.6, 1000), (0.8, 2000), (0.9, 3000), (-0.6, 800)]:
        x = _ar1(phi, n, rng)
        r = float(acf(x, nlags=1, fft=False)[1])
        b = _politis_white_ar1(r, n)
        assert abs(b - round(b)) > 1e-6  # not on a ceiling boundary, where rounding could decide
        assert block_length(x) == min(n // 3, max(1, math.ceil(b))), (phi, n, b)


def test_block_length_limits() -> None:
    """Source: the documented contract (at least 1, at most max(1, n // 3))."""
    rng = np.random.default_rng(3)
    assert block_length(np.array([])) == 1
    assert block_length(np.array([1.0, 5.0])) == 1
    assert block_length(np.full(100, 7.0)) == 1
    assert block_length(np.tile([1.0, -1.0], 45)) == 30  # r1 close to -1
    assert block_length(np.cumsum(rng.standard_normal(90))) <= 30
    assert block_length(rng.standard_normal(1000)) <= 3
    assert block_length(_ar1(0.9, 1000, rng)) > block_length(_ar1(0.5, 1000, rng)) > 1


# --------------------------------------------------------------------------- bootstrap


def _coverage_of_ar1_quantile(block: int | None, sims: int = 200) -> float:
    phi, n, p, sigma = 0.7, 1000, 0.9, 1.0
    truth = float(norm.ppf(p)) * sigma / math.sqrt(1.0 - phi * phi)
    rng = np.random.default_rng(2024)
    hits = 0
    for i in range(sims):
        x = _ar1(phi, n, rng, sigma)
        _, low, high = quantile_ci(x, p, 0.9, seed=i, replicates=200, block=block)
        hits += low <= truth <= high
    return hits / sims


def test_block_bootstrap_covers_the_true_ar1_quantile_and_iid_does_not() -> None:
    """Source: the stationary marginal of a Gaussian AR(1), N(0, sigma^2 / (1 - phi^2)).

    phi = 0.7, n = 1000, p = 0.9, 200 seeded series, 200 replicates each, 90% intervals.
    Measured: automatic blocks (mean length about 23) cover the truth in 86.5% of the series;
    the i.i.d. bootstrap (block=1), which ignores the autocorrelation, in 61.5%.
    (A 1000-series run gave 86.7% and 64.7%.)
    """
    blocked = _coverage_of_ar1_quantile(None)
    iid = _coverage_of_ar1_quantile(1)
    assert blocked >= 0.80
    assert iid < blocked - 0.10


def test_quantile_ci_is_deterministic_per_seed() -> None:
    """Source: the documented contract (np.random.default_rng(seed): same data, same interval)."""
    x = _ar1(0.6, 800, np.random.default_rng(5))
    first = quantile_ci(x, 0.95, seed=17)
    assert quantile_ci(x, 0.95, seed=17) == first
    assert quantile_ci(x.copy(), 0.95, seed=17) == first
    assert quantile_ci(x, 0.95, seed=18) != first
    assert quantile_ci(x, 0.95, seed=17, block=block_length(x)) == first
    assert size(x, seed=4) == size(x, seed=4)
    assert first[0] == quantile(x, 0.95)
    assert first[1] <= first[0] <= first[2]


def test_quantile_ci_does_not_depend_on_the_chunk_size(monkeypatch: pytest.MonkeyPatch) -> None:
    """Source: the documented contract (chunking bounds memory and leaves the result unchanged)."""
    x = _ar1(0.7, 3000, np.random.default_rng(9))
    whole = quantile_ci(x, 0.9, seed=5, replicates=300)
    monkeypatch.setattr(bounds, "_CHUNK_ELEMENTS", 5000)  # one replicate per chunk
    assert quantile_ci(x, 0.9, seed=5, replicates=300) == whole


def test_quantile_ci_memory_is_bounded() -> None:
    """Source: the documented contract. 200 replicates of a 100k series would take 160 MB of
    samples (plus as much in indices) at once; chunking keeps the traced peak far lower."""
    x = np.random.default_rng(0).standard_normal(100_000)
    tracemalloc.start()
    try:
        quantile_ci(x, 0.95, replicates=200, block=50)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 64 * 2**20


def test_quantile_ci_small_and_bad_input() -> None:
    """Source: the documented contract (n < 2 -> (x[0] or nan, nan, nan); ValueError on bad settings)."""
    est, low, high = quantile_ci(np.array([]), 0.5)
    assert math.isnan(est) and math.isnan(low) and math.isnan(high)
    est, low, high = quantile_ci(np.array([4.0]), 0.5)
    assert est == 4.0 and math.isnan(low) and math.isnan(high)
    assert quantile_ci(np.array([1.0, 2.0]), 0.5, block=99)[0] == 1.5  # block capped at n
    x = np.arange(10.0)
    for kwargs in ({"block": 0}, {"replicates": 0}, {"confidence": 1.0}, {"confidence": 0.0}):
        with pytest.raises(ValueError):
            quantile_ci(x, 0.5, **kwargs)
