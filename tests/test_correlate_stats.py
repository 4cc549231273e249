"""Correlation ranking: Pearson/Spearman, lags, effective n, p- and q-values, strongest pairs."""
from __future__ import annotations

import hashlib
import json
import math
import re
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from scipy.signal import lfilter
from statsmodels.stats.multitest import multipletests
from statsmodels.tsa.stattools import ccf

from warehouse.stats.correlate import (
    Lagged,
    Pair,
    PairScan,
    bh_qvalues,
    bretherton_n_eff,
    lag1_autocorrelation,
    lagged_corr,
    p_values,
    rank_columns,
    top_pairs,
)

REFERENCE = Path(__file__).parent / "reference"


# --------------------------------------------------------------------------- helpers


@contextmanager
def _no_runtime_warnings() -> Iterator[None]:
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        yield


def _shifted_pair(x: np.ndarray, y: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """(x[t - k], y[t]) for every t where both indices exist: lag +k means x leads y by k."""
    n = x.size
    if k >= 0:
        return x[: n - k], y[k:]
    return x[-k:], y[: n + k]


def _complete(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    ok = ~np.isnan(a) & ~np.isnan(b)
    return a[ok], b[ok]


def _datasets() -> Iterator[tuple[str, np.ndarray, np.ndarray]]:
    """(name, y (n,), X (n, m)) with some columns related to y; normal, heavy-tailed and tied."""
    rng = np.random.default_rng(20240611)
    n, m = 150, 12
    base = rng.normal(size=n)
    mix = np.linspace(-0.9, 0.9, m)

    def related(noise: np.ndarray) -> np.ndarray:
        return mix * base[:, None] + noise

    yield "normal", base, related(rng.normal(size=(n, m)))
    yield "pareto", rng.pareto(1.5, n) + base, related(rng.pareto(1.2, (n, m)))
    yield "lognormal", np.exp(2.0 * base), np.exp(related(rng.normal(size=(n, m))) * 1.5)
    yield "tied", np.round(base * 2.0), np.round(related(rng.normal(size=(n, m))))


# --------------------------------------------------------------------------- scipy references


@pytest.mark.parametrize("name", ["normal", "pareto", "lognormal", "tied"])
def test_lag0_pearson_and_p_match_scipy_pearsonr(name: str) -> None:
    """Source: scipy.stats.pearsonr (r and its two-sided p, exact null distribution of r)."""
    _, y, X = next(d for d in _datasets() if d[0] == name)
    out = lagged_corr(y, X)
    p = p_values(out.r[0], out.n[0])
    for c in range(X.shape[1]):
        ref = stats.pearsonr(X[:, c], y)
        assert out.r[0, c] == pytest.approx(ref.statistic, abs=1e-9)
        assert p[c] == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)
    assert out.lags.tolist() == [0] and (out.n == y.size).all()


@pytest.mark.parametrize("name", ["normal", "pareto", "lognormal", "tied"])
def test_ranked_lag0_matches_scipy_spearmanr(name: str) -> None:
    """Source: scipy.stats.spearmanr (rho = Pearson of average ranks; p from t with n - 2 df)."""
    _, y, X = next(d for d in _datasets() if d[0] == name)
    out = lagged_corr(rank_columns(y), rank_columns(X))
    p = p_values(out.r[0], out.n[0])
    for c in range(X.shape[1]):
        ref = stats.spearmanr(X[:, c], y)
        assert out.r[0, c] == pytest.approx(ref.statistic, abs=1e-9)
        assert p[c] == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)


def test_rank_columns_equals_scipy_rankdata_with_ties_and_nans() -> None:
    """Source: scipy.stats.rankdata(method="average") on each column's non-NaN values."""
    rng = np.random.default_rng(3)
    X = np.round(rng.normal(size=(400, 9)) * 1.5)          # many ties
    X[rng.random(X.shape) < 0.15] = np.nan
    X[:, 4] = 7.0                                          # all tied
    X[:, 5] = np.nan                                       # nothing present
    R = rank_columns(X)
    for c in range(X.shape[1]):
        ok = ~np.isnan(X[:, c])
        np.testing.assert_array_equal(R[ok, c], stats.rankdata(X[ok, c], method="average"))
        assert np.isnan(R[~ok, c]).all()
    np.testing.assert_array_equal(rank_columns(X[:, 0]), R[:, 0])


def test_pairwise_complete_equals_pearsonr_on_shared_rows() -> None:
    """Source: scipy.stats.pearsonr on exactly the rows where both series are present."""
    rng = np.random.default_rng(11)
    n, m = 300, 10
    y = rng.normal(size=n)
    X = 0.4 * y[:, None] + rng.normal(size=(n, m)) + 1e6      # a large offset, as counters have
    y[rng.random(n) < 0.1] = np.nan
    X[rng.random((n, m)) < np.linspace(0.0, 0.6, m)] = np.nan
    out = lagged_corr(y, X)
    for c in range(m):
        a, b = _complete(X[:, c], y)
        assert out.n[0, c] == a.size
        assert out.r[0, c] == pytest.approx(stats.pearsonr(a, b).statistic, abs=1e-9)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), max_lag=st.integers(0, 6), holes=st.floats(0.0, 0.5))
def test_every_lag_equals_corrcoef_on_explicitly_shifted_arrays(
    seed: int, max_lag: int, holes: float,
) -> None:
    """Source: numpy.corrcoef on x[t - k], y[t] (the lag convention written out), to 1e-12."""
    rng = np.random.default_rng(seed)
    n, m = 60, 5
    y = rng.normal(size=n)
    X = rng.normal(size=(n, m)) + 0.5 * np.roll(y, -2)[:, None]
    X[rng.random((n, m)) < holes] = np.nan
    y[rng.random(n) < holes / 2] = np.nan
    out = lagged_corr(y, X, max_lag)
    assert out.lags.tolist() == list(range(-max_lag, max_lag + 1))
    for row, k in enumerate(out.lags.tolist()):
        for c in range(m):
            a, b = _complete(*_shifted_pair(X[:, c], y, k))
            assert out.n[row, c] == a.size
            if a.size < 3 or np.ptp(a) == 0 or np.ptp(b) == 0:
                assert np.isnan(out.r[row, c])
            else:
                assert out.r[row, c] == pytest.approx(np.corrcoef(a, b)[0, 1], abs=1e-12)


# --------------------------------------------------------------------------- published data sets


def test_reference_copies_match_the_recorded_sha256() -> None:
    """Source: tests/reference/SOURCES.md (section added for this file): byte-for-byte copies."""
    text = (REFERENCE / "SOURCES.md").read_text(encoding="utf-8")
    recorded = {name: digest for digest, name in re.findall(r"^([0-9a-f]{64})  (\S+)$", text, re.M)}
    for path in (REFERENCE / "anscombe.csv", REFERENCE / "nist-strd" / "Norris.dat"):
        assert recorded[path.name] == hashlib.sha256(path.read_bytes()).hexdigest(), path.name


def test_anscombe_quartet_all_give_r_0_816() -> None:
    """Source: Anscombe 1973, The American Statistician 27:17-21 (r = 0.816 for all four sets);
    data tests/reference/anscombe.csv, recomputed r per set from SOURCES.md (Anscombe section).

    The published 0.816 is cut at three decimals: set IV's r is 0.81652, so the check is that every
    set lies within 0.001 of 0.816 and agrees with the recomputed six-decimal values."""
    recomputed = {"I": 0.816421, "II": 0.816237, "III": 0.816287, "IV": 0.816521}
    lines = (REFERENCE / "anscombe.csv").read_text(encoding="ascii").splitlines()
    assert lines[0] == "set,obs,x,y"
    rows = [line.split(",") for line in lines[1:]]
    assert len(rows) == 44
    for name in ("I", "II", "III", "IV"):
        x = np.array([float(r[2]) for r in rows if r[0] == name])
        y = np.array([float(r[3]) for r in rows if r[0] == name])
        r = lagged_corr(y, x).r[0, 0]
        assert abs(r - 0.816) < 1e-3, name
        assert r == pytest.approx(recomputed[name], abs=5e-7), name
        assert top_pairs(np.column_stack([x, y]), 1).pairs[0].r == pytest.approx(r, abs=1e-12)


def test_nist_norris_certified_r_squared() -> None:
    """Source: NIST StRD Norris (linear regression), certified R-squared 0.999993745883712
    (tests/reference/nist-strd/certified.json, "linear_regression"). Required LRE >= 9."""
    certified = json.loads((REFERENCE / "nist-strd" / "certified.json").read_text(encoding="ascii"))
    r2_cert = certified["linear_regression"]["Norris"]["certified"]["r_squared"]
    lines = (REFERENCE / "nist-strd" / "Norris.dat").read_text(encoding="ascii").splitlines()
    data = np.array([[float(v) for v in line.split()] for line in lines[60:] if line.strip()])
    assert data.shape == (36, 2)
    y, x = data[:, 0], data[:, 1]
    for r in (lagged_corr(y, x).r[0, 0], top_pairs(data, 1).pairs[0].r):
        lre = -math.log10(abs(r * r - r2_cert) / r2_cert) if r * r != r2_cert else 15.0
        assert lre >= 9.0


# --------------------------------------------------------------------------- lag convention


def test_lag_sign_convention_counter_leading_by_three_peaks_at_plus_three() -> None:
    """Source: statsmodels.tsa.stattools.ccf: ccf(y, x)[k] correlates y[t + k] with x[t], i.e. x
    leading by k; our lag +k must agree with it (sign and index), and on a long series the values
    agree up to ccf's full-series means and sds (a difference of order 1/n)."""
    rng = np.random.default_rng(5)
    n = 20_000
    z = lfilter([1.0], [1.0, -0.5], rng.normal(size=n + 3))
    x, y = z[3:], z[:-3] + 0.5 * rng.normal(size=n)        # y[t] = x[t - 3] + noise: x leads by 3
    out = lagged_corr(y, x, max_lag=8)
    assert int(out.lags[np.nanargmax(out.r[:, 0])]) == 3
    leads = ccf(y, x, adjusted=True)[:9]                    # lags 0..8 with x leading
    lags_back = ccf(x, y, adjusted=True)[:9]                # lags 0..-8
    assert int(np.argmax(leads)) == 3 and np.max(lags_back) < np.max(leads)
    for k in range(9):
        assert out.r[out.lags.tolist().index(k), 0] == pytest.approx(leads[k], abs=2e-3)
        assert out.r[out.lags.tolist().index(-k), 0] == pytest.approx(lags_back[k], abs=2e-3)


def test_lag_longer_than_series_is_undefined() -> None:
    """Source: definition (an overlap of fewer than 3 buckets has no correlation)."""
    y = np.arange(5.0)
    out = lagged_corr(y, np.column_stack([y**2, -y]), max_lag=6)
    assert out.n[:, 0].tolist() == [0, 0, 1, 2, 3, 4, 5, 4, 3, 2, 1, 0, 0]
    assert np.isnan(out.r[np.abs(out.lags) > 2]).all()
    assert out.r[out.lags.tolist().index(0), 1] == pytest.approx(-1.0)


# --------------------------------------------------------------------------- significance


def test_bh_qvalues_match_statsmodels_fdr_bh_with_nans_and_ties() -> None:
    """Source: statsmodels.stats.multitest.multipletests(method="fdr_bh"), on the finite entries."""
    rng = np.random.default_rng(8)
    p = np.concatenate([rng.uniform(size=300) ** 3, [0.01, 0.01, 0.01, 0.5, 0.5, 1.0, 0.0]])
    p = np.round(p, 3)                                      # many ties
    p[rng.choice(p.size, 25, replace=False)] = np.nan
    grid = p.reshape(-1, 1)[: (p.size // 7) * 7].reshape(-1, 7)
    for arr in (p, grid):
        q = bh_qvalues(arr)
        finite = np.isfinite(arr)
        assert q.shape == arr.shape and np.isnan(q[~finite]).all()
        ref = multipletests(arr[finite], method="fdr_bh")[1]
        np.testing.assert_allclose(q[finite], ref, rtol=0, atol=1e-12)
    assert np.isnan(bh_qvalues(np.array([np.nan, np.nan]))).all()
    assert bh_qvalues(np.array([[0.04]])).tolist() == [[0.04]]


def test_p_values_edges() -> None:
    """Source: definition of the t test of r (df = n_eff - 2): |r| = 1 gives 0, r = 0 gives 1."""
    p = p_values(np.array([1.0, -1.0, 0.0, np.nan, 0.5, 0.5]), np.array([10, 10, 10, 10, np.nan, 2.0]))
    assert p[:3].tolist() == [0.0, 0.0, 1.0]
    assert np.isnan(p[3:]).all()
    t = 0.5 * math.sqrt(8.0 / 0.75)
    assert p_values(0.5, 10.0) == pytest.approx(2.0 * stats.t.sf(t, 8), rel=1e-12)
    # a non-integer effective n is allowed (fractional degrees of freedom)
    t = 0.3 * math.sqrt(10.5 / 0.91)
    assert p_values(0.3, 12.5) == pytest.approx(2.0 * stats.t.sf(t, 10.5), rel=1e-12)


def test_bretherton_n_eff_formula_and_clipping() -> None:
    """Source: Bretherton et al. 1999 (J. Climate 12:1990-2009): n (1 - r1x r1y) / (1 + r1x r1y),
    clipped to [3, n]."""
    got = bretherton_n_eff(np.array([100, 100, 100, 100, 2]), np.array([0.5, 0.99, -0.5, 0.0, 0.5]),
                           np.array([0.5, 0.99, 0.5, 0.7, 0.5]))
    assert got.tolist() == pytest.approx([100 * 0.75 / 1.25, 3.0, 100.0, 100.0, 2.0])
    assert bretherton_n_eff(50, 0.3, 0.3) == pytest.approx(50 * 0.91 / 1.09)
    assert np.isnan(bretherton_n_eff(50, np.nan, 0.3))


def test_lag1_autocorrelation_nist_definition_and_gaps() -> None:
    """Source: NIST StRD r(1) definition (SOURCES.md 1.1), certified values for Lew and NumAcc1."""
    certified = json.loads((REFERENCE / "nist-strd" / "certified.json").read_text(encoding="ascii"))
    certified = certified["univariate"]
    for name in ("Lew", "NumAcc1"):
        lines = (REFERENCE / "nist-strd" / f"{name}.dat").read_text(encoding="ascii").splitlines()
        x = np.array([float(v) for v in lines[60:] if v.strip()])
        assert float(lag1_autocorrelation(x)) == pytest.approx(certified[name]["certified"]["r1"], rel=1e-13)
    gappy = [1, np.nan, 2, np.nan, 3, np.nan, 4, np.nan, 5, np.nan]
    X = np.column_stack([np.arange(10.0), np.full(10, 3.0), gappy])
    with _no_runtime_warnings():
        r1 = lag1_autocorrelation(X)
    assert r1[0] == pytest.approx(0.7) and r1[1] == 0.0 and r1[2] == 0.0    # no consecutive present pair


def test_bretherton_n_eff_restores_the_false_positive_rate_for_ar1_pairs() -> None:
    """Source: Bretherton et al. 1999: independent AR(1) series (phi = 0.8) correlate spuriously; the
    naive t test (n) rejects far more than alpha = 0.05, the test with n_eff stays near it."""
    rng = np.random.default_rng(1999)
    runs, n = 200, 300
    naive = adjusted = 0
    for _ in range(runs):
        pair = lfilter([1.0], [1.0, -0.8], rng.normal(size=(2, n + 100)), axis=1)[:, 100:]
        out = lagged_corr(pair[0], pair[1][:, None])
        r1 = lag1_autocorrelation(pair.T)
        n_eff = bretherton_n_eff(out.n[0], r1[1], r1[0])
        naive += int(p_values(out.r[0], out.n[0])[0] < 0.05)
        adjusted += int(p_values(out.r[0], n_eff)[0] < 0.05)
    assert naive / runs > 0.15
    assert adjusted / runs < 0.10


# --------------------------------------------------------------------------- strongest pairs


def _brute_force_pairs(X: np.ndarray, min_overlap: int = 3) -> list[tuple[int, int, float, int]]:
    """Source: numpy.corrcoef on each pair's shared rows (pairwise complete), all pairs i < j."""
    out = []
    m = X.shape[1]
    for i in range(m):
        for j in range(i + 1, m):
            a, b = _complete(X[:, i], X[:, j])
            if a.size >= min_overlap and np.ptp(a) > 0 and np.ptp(b) > 0:
                out.append((i, j, float(np.corrcoef(a, b)[0, 1]), a.size))
    return sorted(out, key=lambda t: (-abs(t[2]), t[0], t[1]))


def _planted(seed: int, n: int = 120, m: int = 37) -> np.ndarray:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, m))
    for i, j, w in [(3, 30, 0.9), (7, 8, -0.8), (0, 36, 0.7), (12, 25, 0.6), (19, 2, -0.95), (33, 14, 0.5)]:
        X[:, j] = w * X[:, i] + math.sqrt(1 - w * w) * rng.normal(size=n)
    return X


@pytest.mark.parametrize("holes", [0.0, 0.2])
@pytest.mark.parametrize("block", [5, 8, 16, 512])
def test_top_pairs_equals_brute_force_corrcoef(holes: float, block: int) -> None:
    """Source: numpy.corrcoef over all pairs (brute force), top-k by |r|; block sizes 5, 8 and 16
    do not divide m = 37, and with holes the blocks mix complete and incomplete columns."""
    X = _planted(42)
    rng = np.random.default_rng(43)
    if holes:                                               # columns 0-24 get holes, 25-36 stay complete
        X[:, :25][rng.random((X.shape[0], 25)) < holes] = np.nan
        X[:, 10] = np.nan                                   # a column with no data
        X[:, 11][3:] = np.nan                               # too little overlap with anything
    X[:, 20] = 4.25                                         # a constant column
    ref = _brute_force_pairs(X)
    k = 12
    scan = top_pairs(X, k, block=block)
    assert isinstance(scan, PairScan)
    assert scan.tested == len(ref)
    assert scan.tested + scan.undefined == 37 * 36 // 2
    assert [(p.i, p.j, p.n) for p in scan.pairs] == [(i, j, n) for i, j, _, n in ref[:k]]
    np.testing.assert_allclose([p.r for p in scan.pairs], [r for _, _, r, _ in ref[:k]], rtol=0, atol=1e-12)
    assert all(isinstance(p, Pair) and p.i < p.j for p in scan.pairs)
    every = top_pairs(X, 10_000, block=block).pairs          # every defined pair, all block-pair kinds
    assert {(p.i, p.j): p.n for p in every} == {(i, j): n for i, j, _, n in ref}
    got = {(p.i, p.j): p.r for p in every}
    assert max(abs(got[(i, j)] - r) for i, j, r, _ in ref) < 1e-12


def test_top_pairs_min_overlap_and_small_top() -> None:
    """Source: numpy.corrcoef brute force with a minimum overlap of 90 shared rows."""
    X = _planted(7)
    rng = np.random.default_rng(8)
    X[rng.random(X.shape) < np.linspace(0.0, 0.5, X.shape[1])] = np.nan
    ref = _brute_force_pairs(X, min_overlap=90)
    scan = top_pairs(X, 3, min_overlap=90, block=6)
    assert scan.tested == len(ref)
    assert [(p.i, p.j) for p in scan.pairs] == [(i, j) for i, j, _, _ in ref[:3]]
    assert top_pairs(X, 0).pairs == []


def test_top_pairs_handles_an_overlap_far_from_the_column_means() -> None:
    """Source: numpy.corrcoef on the shared rows. A huge value in rows the partner lacks puts the
    overlap mean far from the column mean (one-pass sums would lose all digits)."""
    rng = np.random.default_rng(9)
    n = 200
    a = rng.normal(size=n)
    b = 0.6 * a + rng.normal(size=n)
    a[:5] = 1e12
    b[:5] = np.nan
    c = np.where(np.arange(n) < 5, 1e12, 3.0)               # constant on its overlap with b
    X = np.column_stack([a, b, c])
    with _no_runtime_warnings():
        scan = top_pairs(X, 3)
        lag = lagged_corr(b, np.column_stack([a, c]))
    ra, rb = _complete(a, b)
    expect = np.corrcoef(ra, rb)[0, 1]
    assert [(p.i, p.j) for p in scan.pairs][0] == (0, 2)    # a and c share the spikes: r near 1
    rab = next(p for p in scan.pairs if (p.i, p.j) == (0, 1))
    assert rab.r == pytest.approx(expect, abs=1e-12) and rab.n == n - 5
    assert lag.r[0, 0] == pytest.approx(expect, abs=1e-12)
    assert np.isnan(lag.r[0, 1])
    assert scan.tested == 2                                 # (b, c) is constant on its overlap


def test_large_offsets_keep_full_precision() -> None:
    """Source: numpy.corrcoef on the same data minus 1e12 (an exact subtraction here, by Sterbenz's
    lemma). Mean/sd = 1e12, harder than NIST's NumAcc4 (1e8): centring on a mean summed in float64
    leaves a residue that a plain standardise-then-GEMM loses about 1e-6 of r to."""
    rng = np.random.default_rng(12)
    n, m = 5000, 6
    base = rng.normal(size=(n, m))
    base[:, 1] += 0.7 * base[:, 0]
    X = 1e12 + base
    reference = np.corrcoef(X - 1e12, rowvar=False)
    scan = top_pairs(X, 15, block=4)
    for p in scan.pairs:
        assert p.r == pytest.approx(reference[p.i, p.j], abs=1e-9)
    lag = lagged_corr(X[:, 0], X[:, 1:], max_lag=2)
    assert lag.r[2] == pytest.approx(reference[0, 1:], abs=1e-9)


def test_extreme_magnitudes_neither_overflow_nor_underflow() -> None:
    """Source: numpy.corrcoef on the unscaled data (Pearson r is scale-free)."""
    rng = np.random.default_rng(13)
    base = rng.normal(size=(200, 3))
    base[:, 1] += base[:, 0]
    reference = np.corrcoef(base, rowvar=False)
    X = base * np.array([1e300, 1e-300, 1.0])
    with _no_runtime_warnings():
        lag = lagged_corr(X[:, 0], X[:, 1:])
        scan = top_pairs(X, 3)
    assert lag.r[0] == pytest.approx(reference[0, 1:], abs=1e-12)
    assert {(p.i, p.j): p.r for p in scan.pairs} == pytest.approx(
        {(0, 1): reference[0, 1], (0, 2): reference[0, 2], (1, 2): reference[1, 2]}, abs=1e-12)


# --------------------------------------------------------------------------- degenerate input


def test_constant_columns_give_nan_without_warnings() -> None:
    """Source: definition (Pearson r is undefined when a series has zero variance)."""
    n = 50
    y = np.sin(np.arange(n))
    X = np.column_stack([np.full(n, 0.1), np.zeros(n), np.full(n, np.nan), np.cos(np.arange(n)),
                         np.full(n, 1e300)])
    X[:2, 3] = np.nan
    with _no_runtime_warnings():
        out = lagged_corr(y, X, max_lag=2)
        ranked = lagged_corr(rank_columns(y), rank_columns(X), max_lag=2)
        flat = lagged_corr(np.full(n, 2.0), X, max_lag=1)
        scan = top_pairs(X, 5)
        p = p_values(out.r, out.n)
        q = bh_qvalues(p)
        r1 = lag1_autocorrelation(X)
    for res in (out, ranked):
        assert np.isnan(res.r[:, [0, 1, 2, 4]]).all()
        assert np.isfinite(res.r[:, 3]).all()
    assert np.isnan(flat.r).all()
    assert (out.n[:, 2] == 0).all()
    assert np.isnan(p[:, 0]).all() and np.isnan(q[:, 0]).all() and np.isfinite(q[:, 3]).all()
    assert scan.pairs == [] and scan.tested == 0 and scan.undefined == 10
    assert r1[[0, 1, 2, 4]].tolist() == [0.0, 0.0, 0.0, 0.0]


def test_shapes_and_argument_checks() -> None:
    """Source: the documented API (shapes, dtypes, refusals)."""
    y = np.arange(10.0)
    out = lagged_corr(y, np.column_stack([y, y[::-1]]), max_lag=2)
    assert isinstance(out, Lagged)
    assert out.r.shape == out.n.shape == (5, 2) and out.n.dtype == np.int64
    assert out.r[2].tolist() == pytest.approx([1.0, -1.0])
    with pytest.raises(ValueError):
        lagged_corr(y, np.zeros((9, 2)))
    with pytest.raises(ValueError):
        lagged_corr(y, np.zeros((10, 2)), max_lag=-1)
    with pytest.raises(ValueError):
        top_pairs(np.zeros((10, 2)), -1)
