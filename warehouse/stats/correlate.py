"""Correlation of one symptom series with thousands of counters, and among the counters.

Everything is a pure function of NumPy arrays: no I/O, no database. Time runs down axis 0
(one row per time bucket), counters along axis 1, and a missing value is NaN. Correlations are
*pairwise complete*: each pair uses exactly the buckets where both series are present.

The sums behind every correlation come from BLAS matrix products over column blocks (no Python
loop per counter). With M the present-mask of a block and X0 the block centred on each column's
own mean with NaN replaced by 0, the overlap count, sums, sums of squares and cross products of
every (target, counter) pair are entries of M^T M, M^T X0, M^T X0^2 and X0^T X0. Centring first
keeps the subtraction "sum of squares minus n * mean^2" well conditioned; where it is not (the
overlap's own mean lies far from the column mean, or the overlap is constant) the few affected
pairs are recomputed exactly with a two-pass formula on their overlap, vectorised over those pairs.

Published methods used:

* Pearson's product-moment correlation; Spearman's rank correlation is Pearson on average ranks
  (``rank_columns`` then ``lagged_corr``).
* Effective sample size for the correlation of two autocorrelated series
  (Bretherton, C. S., Widmann, M., Dymnikov, V. P., Wallace, J. M. & Blade, I. 1999, "The effective
  number of spatial degrees of freedom of a time-varying field", J. Climate 12:1990-2009).
* The t test of a correlation coefficient, and Benjamini-Hochberg adjusted p-values
  (Benjamini, Y. & Hochberg, Y. 1995, J. R. Statist. Soc. B 57:289-300).
"""
from __future__ import annotations

import os
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = [
    "Lagged",
    "Pair",
    "PairScan",
    "bh_qvalues",
    "bretherton_n_eff",
    "lag1_autocorrelation",
    "lagged_corr",
    "p_values",
    "rank_columns",
    "top_pairs",
]

# Bytes of float64 scratch per column block (about 32 MB): sets how many columns are processed at
# once whatever the number of rows.
_BLOCK_BYTES = 32 << 20
# Threads ranking column blocks at once (sorting releases the GIL).
RANK_THREADS = min(2, os.cpu_count() or 1)
# Bytes of prepared columns for the two blocks alive in the pair scan. Wide blocks keep the GEMMs
# efficient (measured here at 40,320 rows: 23 GFLOP/s at width 512, 37 at 1,024); complete blocks
# need one array each, blocks with missing values three (data, mask, squares).
_PAIR_BYTES = 640 << 20
# A one-pass variance "S2 - S1^2/n" smaller than this fraction of the sum of squares it was derived
# from has lost more than six of its sixteen digits to cancellation: recompute it with two passes.
_ILL_CONDITIONED = 1e-6
# Columns larger than this (or smaller than its inverse) in magnitude are rescaled by a power of two.
_EXTREME = 2.0**400


# --------------------------------------------------------------------------- small helpers


def _as_matrix(X: np.ndarray) -> np.ndarray:
    a = np.asarray(X, dtype=np.float64)
    if a.ndim == 1:
        a = a[:, None]
    if a.ndim != 2:
        raise ValueError(f"expected a 2-D array (rows = time buckets, columns = counters), got {a.ndim}-D")
    return a


def _as_vector(y: np.ndarray) -> np.ndarray:
    a = np.asarray(y, dtype=np.float64)
    if a.ndim != 1:
        raise ValueError(f"expected a 1-D target series, got {a.ndim}-D")
    return a


def _column_blocks(n_rows: int, n_cols: int, width: int | None = None) -> Iterator[slice]:
    if width is None:
        width = max(16, _BLOCK_BYTES // (8 * max(n_rows, 1)))
    for start in range(0, n_cols, width):
        yield slice(start, min(start + width, n_cols))


class _Scratch:
    """Reusable work arrays of n rows, handed out as C-contiguous (n, w) views.

    Large temporaries would otherwise be fresh allocations per column block, and first-touching
    fresh pages costs as much as the arithmetic on them.
    """

    def __init__(self, n_rows: int) -> None:
        self.n = n_rows
        self._flat: dict[str, np.ndarray] = {}

    def get(self, name: str, width: int, dtype: type = np.float64) -> np.ndarray:
        size = self.n * width
        buf = self._flat.get(name)
        if buf is None or buf.size < size or buf.dtype != dtype:
            buf = self._flat[name] = np.empty(size, dtype=dtype)
        return buf[:size].reshape(self.n, width)


def _take(scratch: _Scratch | None, name: str, shape: tuple[int, int],
          dtype: type = np.float64) -> np.ndarray:
    return np.empty(shape, dtype=dtype) if scratch is None else scratch.get(name, shape[1], dtype)


@dataclass(frozen=True)
class _Summary:
    """Per-column facts that decide how a column is prepared."""
    hi: np.ndarray          # (w,) largest present value (-inf when none)
    lo: np.ndarray          # (w,) smallest present value (+inf when none)
    count: np.ndarray       # (w,) present values
    total: np.ndarray       # (w,) sum of present values

    @property
    def constant(self) -> np.ndarray:
        """All present values equal (exact test max == min), or none present."""
        return ~(self.hi > self.lo)

    def take(self, cols: np.ndarray | slice) -> _Summary:
        return _Summary(self.hi[cols], self.lo[cols], self.count[cols], self.total[cols])


def _summarise(X: np.ndarray) -> _Summary:
    """Max, min, count and sum of the present values of each column.

    Complete columns cost three reductions over the whole width at once (much faster than per
    narrow block); columns with NaN are then redone in bounded chunks.
    """
    n, m = X.shape
    hi, lo = X.max(axis=0, initial=-np.inf), X.min(axis=0, initial=np.inf)   # NaN if the column has one
    total = X.sum(axis=0)
    count = np.full(m, n)
    holes = np.flatnonzero(np.isnan(hi) | np.isnan(lo))
    step = max(1, _BLOCK_BYTES // (8 * max(n, 1)))
    for start in range(0, holes.size, step):
        chunk = holes[start: start + step]
        part = X[:, chunk]                               # a copy (fancy indexing)
        absent = np.isnan(part)
        count[chunk] = n - absent.sum(axis=0)
        hi[chunk] = np.fmax.reduce(part, axis=0, initial=-np.inf)
        lo[chunk] = np.fmin.reduce(part, axis=0, initial=np.inf)
        part[absent] = 0.0
        total[chunk] = part.sum(axis=0)
    return _Summary(hi, lo, count, total)


@dataclass(frozen=True)
class _Columns:
    """A block of columns made ready for the sums: centred, absent entries 0."""
    X0: np.ndarray                  # (n, w) each column (rescaled if extreme) minus its mean; 0 where absent
    present: np.ndarray | None      # (n, w) bool, or None when every entry is present
    count: np.ndarray               # (w,) present values per column
    constant: np.ndarray            # (w,) bool: present values all equal (max == min), or none present


def _prepare_columns(X: np.ndarray, summary: _Summary | None = None,
                     scratch: _Scratch | None = None, tag: str = "") -> _Columns:
    """Centre each column of X (n, w) on the mean of its present values (X itself is not modified).

    Correlations are scale-free, so a column whose magnitude is extreme (beyond 2^+-400, where sums
    of squares would overflow or underflow) is first multiplied by the power of two that brings its
    largest magnitude to (1/2, 1]; that is exact in floating point. Inputs are finite or NaN.
    ``summary`` may pass in ``_summarise(X)`` when it is already known; the result lives in
    ``scratch`` buffers named after ``tag`` when a scratch is given (valid until they are reused).
    """
    n, w = X.shape
    sm = _summarise(X) if summary is None else summary
    count = sm.count
    big = np.where(count == 0, 0.0, np.maximum(np.abs(sm.hi), np.abs(sm.lo)))
    extreme = (big > _EXTREME) | ((big < 1.0 / _EXTREME) & (big > 0.0))
    scale = np.where(extreme, np.ldexp(1.0, -np.frexp(big)[1]), 1.0) if extreme.any() else None
    X0 = _take(scratch, tag + "X0", (n, w))
    present: np.ndarray | None = None
    if bool((count == n).all()):
        if scale is None:
            np.subtract(X, sm.total / max(n, 1), out=X0)            # centred copy in one pass
        else:
            np.multiply(X, scale, out=X0)
            X0 -= X0.sum(axis=0) / max(n, 1)
    else:
        present = _take(scratch, tag + "present", (n, w), bool)
        np.isnan(X, out=present)
        np.logical_not(present, out=present)
        X0[...] = 0.0
        np.copyto(X0, X, where=present)
        if scale is None:
            X0 -= sm.total / np.maximum(count, 1)
        else:
            X0 *= scale
            X0 -= X0.sum(axis=0) / np.maximum(count, 1)
        X0 *= present
    return _Columns(X0=X0, present=present, count=count, constant=sm.constant)


def _pearson_from_sums(
    count: np.ndarray, sx: np.ndarray, sy: np.ndarray, sxx: np.ndarray, syy: np.ndarray, sxy: np.ndarray,
    scale_x: np.ndarray, scale_y: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Pearson r from overlap sums of centred data, and a mask of entries to recompute exactly.

    ``scale_*`` is the largest sum of squares the variance was derived from; a variance below
    ``_ILL_CONDITIONED`` times it is flagged (this also catches an overlap that is constant).
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        vx = sxx - sx * sx / count
        vy = syy - sy * sy / count
        cov = sxy - sx * sy / count
        r = cov / np.sqrt(vx * vy)
    enough = count >= 3
    refine = enough & ((vx <= _ILL_CONDITIONED * scale_x) | (vy <= _ILL_CONDITIONED * scale_y))
    r = np.where(enough & ~refine, np.clip(r, -1.0, 1.0), np.nan)
    return r, refine


def _pearson_exact(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Column-wise pairwise-complete Pearson of x[:, p] with y[:, p], two-pass on the overlap.

    NaN where the overlap has fewer than 3 rows or either side is constant on it (max == min).
    Returns (r, overlap count).
    """
    both = ~np.isnan(x) & ~np.isnan(y)
    cx = _prepare_columns(np.where(both, x, np.nan))
    cy = _prepare_columns(np.where(both, y, np.nan))
    dx, dy = cx.X0, cy.X0
    with np.errstate(invalid="ignore", divide="ignore"):
        sxy, sxx, syy = (np.einsum("ij,ij->j", u, v) for u, v in ((dx, dy), (dx, dx), (dy, dy)))
        r = sxy / np.sqrt(sxx * syy)
    r = np.where((cx.count >= 3) & ~cx.constant & ~cy.constant, np.clip(r, -1.0, 1.0), np.nan)
    return r, cx.count


def _refine_pairs(x_cols: np.ndarray, y_cols: np.ndarray, X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Exact r for the pairs (X[:, x_cols[p]], Y[:, y_cols[p]]), in chunks that bound the scratch."""
    out = np.empty(x_cols.size)
    step = max(1, _BLOCK_BYTES // (8 * max(X.shape[0], 1)))
    for start in range(0, x_cols.size, step):
        part = slice(start, start + step)
        out[part], _ = _pearson_exact(X[:, x_cols[part]], Y[:, y_cols[part]])
    return out


# --------------------------------------------------------------------------- ranks, lag-1 autocorrelation


def _tie_averaged_positions(tied: np.ndarray) -> np.ndarray:
    """1-based ranks along axis 1 of sorted rows, runs of equal values given their mean rank.

    ``tied[:, i]`` says sorted element i + 1 equals element i. A run spanning positions first..last
    gets (first + last) / 2 + 1. The cost follows the number of ties: with many ties (whole numbers,
    a few distinct levels) every run is expanded at once with np.repeat; with few, only the tied
    elements are touched.
    """
    k, n = tied.shape[0], tied.shape[1] + 1
    if 4 * int(np.count_nonzero(tied)) > tied.size:
        new_run = np.ones((k, n), dtype=bool)
        new_run[:, 1:] = ~tied
        starts = np.flatnonzero(new_run)              # every row starts a run
        lengths = np.diff(np.append(starts, k * n))
        return np.repeat((starts % n) + (lengths - 1) * 0.5 + 1.0, lengths).reshape(k, n)
    out = np.tile(np.arange(1.0, n + 1), (k, 1))
    rows, cols = np.nonzero(tied)                      # pair (cols, cols + 1) of row `rows` is tied
    if not rows.size:
        return out
    e = rows * n + cols                                # flat index of the pair's left element
    group = np.concatenate(([True], np.diff(e) != 1))  # consecutive pairs chain into one run
    first = e[group]
    last = np.append(e[np.flatnonzero(group)[1:] - 1], e[-1]) + 1
    size = last - first + 1
    elements = np.repeat(first - np.cumsum(np.append(0, size[:-1])), size) + np.arange(int(size.sum()))
    out.ravel()[elements] = np.repeat((first % n + last % n) * 0.5 + 1.0, size)
    return out


def _average_ranks_rows(A: np.ndarray) -> np.ndarray:
    """Average ranks (1-based) along axis 1 of a C-contiguous (k, n) block; NaN sorts last and stays NaN."""
    k, n = A.shape
    order = np.argsort(A, axis=1)
    s = np.take_along_axis(A, order, axis=1)
    tied = s[:, 1:] == s[:, :-1]                         # NaN == NaN is False
    rows = np.flatnonzero(tied.any(axis=1))
    has_nan = bool(n) and bool(np.isnan(s[:, -1]).any())  # NaN sorts last
    ranks = np.empty((k, n))
    if not rows.size and not has_nan:                    # continuous data: rank = sorted position + 1
        np.put_along_axis(ranks, order, np.arange(1.0, n + 1)[None, :], axis=1)
        return ranks
    ranks_sorted = np.tile(np.arange(1.0, n + 1), (k, 1))
    if rows.size:                                        # only rows that have ties pay for the runs
        ranks_sorted[rows] = _tie_averaged_positions(tied[rows])
    if has_nan:
        n_present = (~np.isnan(s)).sum(axis=1)
        ranks_sorted[np.arange(n) >= n_present[:, None]] = np.nan
    np.put_along_axis(ranks, order, ranks_sorted, axis=1)
    return ranks


def rank_columns(X: np.ndarray) -> np.ndarray:
    """Average ranks of each column over its present entries (ties get the mean of their ranks).

    The same ranks as ``scipy.stats.rankdata(method="average")`` applied to each column's non-NaN
    values; NaN stays NaN. Accepts (n,) or (n, m); returns float64 of the same shape. Pearson
    correlation of ranks is Spearman's rho. Note that with missing values each column is ranked
    over all of its own present values, not over the overlap with another series. The result is
    column-major (each column contiguous), which is also the fastest layout for ``lagged_corr``.
    """
    a = np.asarray(X, dtype=np.float64)
    if a.ndim == 1:
        return rank_columns(a[:, None])[:, 0]
    A = _as_matrix(a)
    n, m = A.shape
    out = np.empty((m, n))                              # returned transposed: column-major (n, m)
    width = max(8, (_BLOCK_BYTES // 4) // (8 * max(n, 1)))
    def rank(cols: slice) -> None:
        out[cols] = _average_ranks_rows(np.ascontiguousarray(A[:, cols].T))

    spans = list(_column_blocks(n, m, width))
    if RANK_THREADS > 1 and len(spans) > 1:
        with ThreadPoolExecutor(RANK_THREADS) as pool:
            list(pool.map(rank, spans))
    else:
        for cols in spans:
            rank(cols)
    return out.T


def _lag1_block(Xb: np.ndarray, summary: _Summary, scratch: _Scratch) -> np.ndarray:
    c = _prepare_columns(Xb, summary, scratch)
    D = c.X0
    den = np.einsum("ij,ij->j", D, D)
    num = np.einsum("ij,ij->j", D[1:], D[:-1])      # absent entries are 0 in D, so they drop out
    pairs = Xb.shape[0] - 1 if c.present is None else (c.present[1:] & c.present[:-1]).sum(axis=0)
    ok = (c.count >= 3) & (pairs >= 1) & ~c.constant & (den > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, np.clip(num / den, -1.0, 1.0), 0.0)


def lag1_autocorrelation(X: np.ndarray) -> np.ndarray:
    """Lag-1 autocorrelation of each column: r1 = sum d_t d_{t-1} / sum d_t^2, d = x - mean.

    The mean and the denominator use every present value of the column; the numerator sums over
    consecutive buckets that are both present (with no NaN this is the NIST StRD r(1), the same as
    statsmodels' ``acf(x)[1]``). 0 where undefined (fewer than 3 present values, no consecutive
    present pair, or a constant column). Clipped to [-1, 1]. Accepts (n,) -> a NumPy float, or
    (n, m) -> (m,).
    """
    a = np.asarray(X, dtype=np.float64)
    A = _as_matrix(a)
    r1 = np.zeros(A.shape[1])
    scratch = _Scratch(A.shape[0])
    summary = _summarise(A)
    for cols in _column_blocks(A.shape[0], A.shape[1]):
        r1[cols] = _lag1_block(A[:, cols], summary.take(cols), scratch)
    return r1[0] if a.ndim == 1 else r1


# --------------------------------------------------------------------------- lagged correlation


@dataclass(frozen=True)
class Lagged:
    """Correlations of a target with each counter at each lag.

    Row ``i`` belongs to lag ``lags[i]``; lag +k means the counter moves k buckets *before* the
    target: r_k = corr(x[t - k], y[t]).
    """
    r: np.ndarray      # (2L+1, m) Pearson r, NaN where undefined (overlap < 3 or zero variance on it)
    n: np.ndarray      # (2L+1, m) int64 pairwise-complete overlap count
    lags: np.ndarray   # (2L+1,) int64, -L..L


def _shifted_targets(y: np.ndarray, lags: np.ndarray) -> np.ndarray:
    """(n, K) matrix whose column for lag k holds y[s + k] at row s (NaN off the end).

    Row s then pairs counter value x[s] with the target k buckets later, i.e. r_k = corr(x[t-k], y[t]).
    """
    n = y.size
    Y = np.full((n, lags.size), np.nan)
    for j, k in enumerate(lags.tolist()):       # a loop over lags (at most 2L+1), not over counters
        if k >= 0:
            Y[: max(n - k, 0), j] = y[k:]
        else:
            Y[min(-k, n):, j] = y[: max(n + k, 0)]
    return Y


@dataclass(frozen=True)
class _Target:
    """The shifted, centred target and its per-lag sums, shared by every column block."""
    Y: np.ndarray          # (n, K) shifted target, NaN where absent
    left: np.ndarray       # (3K, n) rows: present mask, Y0, Y0^2 (the left operand of every GEMM)
    count: np.ndarray      # (K,) present per lag
    sy: np.ndarray         # (K,)
    syy: np.ndarray        # (K,)
    complete: bool         # y has no NaN
    constant: bool         # y's present values are all equal (or there are none)


def _prepare_target(y: np.ndarray, lags: np.ndarray) -> _Target:
    c = _prepare_columns(y[:, None])
    yc = c.X0[:, 0] if c.present is None else np.where(c.present[:, 0], c.X0[:, 0], np.nan)
    Y = _shifted_targets(yc, lags)
    present = ~np.isnan(Y)
    Y0 = np.where(present, Y, 0.0)
    left = np.ascontiguousarray(np.concatenate([present.astype(np.float64), Y0, Y0 * Y0], axis=1).T)
    return _Target(Y=Y, left=left, count=present.sum(axis=0),
                   sy=Y0.sum(axis=0), syy=np.einsum("ij,ij->j", Y0, Y0), complete=c.present is None,
                   constant=bool(c.constant[0]))


def _edge_sums(D: np.ndarray, lags: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For a complete centred block D (n, w): sum of D^2 over the rows each lag keeps, (K, w),
    and over all rows, (w,).

    Lag k >= 0 keeps rows s < n - k; lag k < 0 keeps rows s >= -k. Computed as the total minus
    cumulative sums over the few excluded edge rows, so it costs one pass plus 2L rows.
    """
    n = D.shape[0]
    total = np.einsum("ij,ij->j", D, D)
    e = min(int(np.abs(lags).max(initial=0)), n)
    head = np.vstack([np.zeros((1, D.shape[1])), np.cumsum(D[:e] ** 2, axis=0)])
    tail = np.vstack([np.zeros((1, D.shape[1])), np.cumsum(D[n - e:][::-1] ** 2, axis=0)])
    cut = np.minimum(np.abs(lags), n)
    removed = np.where((lags < 0)[:, None], head[cut], tail[cut])
    return total - removed, total


def _lagged_block(t: _Target, Xb: np.ndarray, summary: _Summary, lags: np.ndarray,
                  scratch: _Scratch) -> tuple[np.ndarray, np.ndarray]:
    """r and overlap counts (K, w) of the target against one column block."""
    K = lags.size
    c = _prepare_columns(Xb, summary, scratch)
    X0 = c.X0
    sx_sxy = t.left[: 2 * K] @ X0
    sx, sxy = sx_sxy[:K], sx_sxy[K:]
    if t.complete and c.present is None:
        # Fast path: overlap counts and target sums depend on the lag only; Sxx from edge rows.
        count = np.broadcast_to(t.count[:, None], (K, Xb.shape[1]))
        sy, syy = t.sy[:, None], t.syy[:, None]
        sxx, total = _edge_sums(X0, lags)
        scale_x = total[None, :]
    else:
        mask = scratch.get("mask", X0.shape[1])
        mask[...] = 1.0 if c.present is None else c.present
        counts_sy_syy = t.left @ mask
        count, sy, syy = counts_sy_syy[:K], counts_sy_syy[K:2 * K], counts_sy_syy[2 * K:]
        sxx = t.left[:K] @ np.multiply(X0, X0, out=scratch.get("sq", X0.shape[1]))
        scale_x = sxx
    # The target's per-lag sum of squares bounds every overlap's, so it serves as its scale.
    r, refine = _pearson_from_sums(count, sx, sy, sxx, syy, sxy, scale_x, t.syy[:, None])
    # A series constant over all its values is constant on every overlap: NaN without a recount
    # (counters that never move are common, and the exact recount costs a pass per pair).
    flat = c.constant[None, :] | t.constant
    r[flat & refine] = np.nan
    refine &= ~flat
    if refine.any():
        lag_idx, col_idx = np.nonzero(refine)
        r[lag_idx, col_idx] = _refine_pairs(col_idx, lag_idx, Xb, t.Y)
    return r, np.rint(np.broadcast_to(count, r.shape)).astype(np.int64)


def lagged_corr(y: np.ndarray, X: np.ndarray, max_lag: int = 0) -> Lagged:
    """Pairwise-complete Pearson r of target ``y`` (n,) with every column of ``X`` (n, m) at lags -L..L.

    Lag +k means the counter moves k buckets before the target: r_k = corr(x[t - k], y[t]) over the
    buckets t where both x[t - k] and y[t] are present. For Spearman's rho pass ranked inputs
    (``rank_columns``); the ranks are then those of the full series, not re-ranked per lag.
    Undefined entries (overlap < 3, or either series constant on the overlap) are NaN.
    """
    yv = _as_vector(y)
    A = _as_matrix(X)
    if A.shape[0] != yv.size:
        raise ValueError(f"y has {yv.size} buckets but X has {A.shape[0]} rows")
    if max_lag < 0:
        raise ValueError(f"max_lag must be >= 0, got {max_lag}")
    lags = np.arange(-max_lag, max_lag + 1, dtype=np.int64)
    t = _prepare_target(yv, lags)
    r = np.empty((lags.size, A.shape[1]))
    n = np.empty((lags.size, A.shape[1]), dtype=np.int64)
    scratch = _Scratch(A.shape[0])
    summary = _summarise(A)
    for cols in _column_blocks(A.shape[0], A.shape[1]):
        r[:, cols], n[:, cols] = _lagged_block(t, A[:, cols], summary.take(cols), lags, scratch)
    return Lagged(r=r, n=n, lags=lags)


# --------------------------------------------------------------------------- significance


def bretherton_n_eff(n: np.ndarray, r1x: np.ndarray, r1y: float | np.ndarray) -> np.ndarray:
    """Effective sample size for the correlation of two autocorrelated series.

    n_eff = n (1 - r1x r1y) / (1 + r1x r1y), with r1x, r1y the lag-1 autocorrelations: the AR(1)
    form given by Bretherton et al. 1999 (J. Climate 12:1990-2009) for the correlation of two time
    series (formula quoted from memory). Clipped to [3, n] (to n when n < 3): negative products would
    otherwise credit more than n samples, and fewer than 3 leaves the t test without degrees of
    freedom. Broadcasts; returns float64.
    """
    nn = np.asarray(n, dtype=np.float64)
    prod = np.asarray(r1x, dtype=np.float64) * np.asarray(r1y, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        raw = nn * (1.0 - prod) / (1.0 + prod)
    return np.minimum(np.maximum(raw, 3.0), nn)


def p_values(r: np.ndarray, n_eff: np.ndarray) -> np.ndarray:
    """Two-sided p-value of the t test of a correlation, t = r sqrt((n_eff - 2) / (1 - r^2)), df = n_eff - 2.

    Evaluated as the regularised incomplete beta I_{1-r^2}((n_eff - 2)/2, 1/2), which equals
    P(|T| >= |t|) for Student's t with n_eff - 2 degrees of freedom and stays accurate as |r| -> 1.
    r = +-1 gives 0; NaN in r or n_eff, or n_eff <= 2, gives NaN. Broadcasts.
    """
    rr = np.asarray(r, dtype=np.float64)
    df = np.asarray(n_eff, dtype=np.float64) - 2.0
    a = np.abs(rr)
    one_minus_r2 = np.clip((1.0 - a) * (1.0 + a), 0.0, 1.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = special.betainc(np.where(df > 0, df, 1.0) * 0.5, 0.5, one_minus_r2)
    return np.where(np.isnan(rr) | ~(df > 0), np.nan, p)


def bh_qvalues(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values) over all finite entries of ``p``, any shape.

    With the m finite p-values sorted ascending, q_(i) = min_{j >= i} min(1, m p_(j) / j). Entries
    that are NaN (or infinite) are not counted as tests and come back NaN.
    """
    a = np.asarray(p, dtype=np.float64)
    flat = a.ravel()
    finite = np.isfinite(flat)
    vals = flat[finite]
    q = np.full(flat.shape, np.nan)
    m = vals.size
    if m:
        order = np.argsort(vals, kind="stable")
        scaled = vals[order] * m / np.arange(1, m + 1)
        adjusted = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
        out = np.empty(m)
        out[order] = adjusted
        q[finite] = out
    return q.reshape(a.shape)


# --------------------------------------------------------------------------- strongest pairs


@dataclass(frozen=True)
class Pair:
    """Counters i < j (column indices of the input) with Pearson r over n shared buckets."""
    i: int
    j: int
    r: float
    n: int


@dataclass(frozen=True)
class PairScan:
    """Result of ``top_pairs``.

    ``pairs``: at most ``top`` pairs, strongest |r| first (ties by (i, j)).
    ``tested``: how many pairs i < j had a defined r (overlap >= min_overlap and neither side
    constant on it): the number of hypotheses for a multiple-testing correction.
    ``undefined``: the remaining pairs, m (m - 1) / 2 - tested.
    """
    pairs: list[Pair]
    tested: int
    undefined: int


@dataclass(frozen=True)
class _Block:
    cols: np.ndarray                 # column indices into X
    Z: np.ndarray                    # (n, w) centred columns; 0 where absent
    M: np.ndarray | None             # (n, w) present mask as 0/1 floats, None when the block has no NaN
    Z2: np.ndarray | None            # (n, w) Z^2, only with M
    s: np.ndarray                    # (w,) column sums of Z (rounding residue of the centring)
    ss: np.ndarray                   # (w,) column sums of Z^2


def _gather(A: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """A[:, cols], as a cheap slice when the columns are consecutive."""
    if cols.size and cols[-1] - cols[0] + 1 == cols.size and bool((np.diff(cols) == 1).all()):
        return A[:, int(cols[0]): int(cols[-1]) + 1]
    return A[:, cols]


def _prepare_block(A: np.ndarray, cols: np.ndarray, summary: _Summary, scratch: _Scratch, tag: str) -> _Block:
    """One block of scan columns, in ``scratch`` buffers named ``tag`` (valid until the next call)."""
    c = _prepare_columns(_gather(A, cols), summary.take(cols), scratch, tag)
    Z = c.X0
    s, ss = Z.sum(axis=0), np.einsum("ij,ij->j", Z, Z)
    if c.present is None:
        return _Block(cols, Z, None, None, s, ss)
    M = scratch.get(tag + "M", cols.size)
    M[...] = c.present
    return _Block(cols, Z, M, np.multiply(Z, Z, out=scratch.get(tag + "Z2", cols.size)), s, ss)


def _masked_sums(a: _Block, b: _Block) -> tuple[np.ndarray, ...]:
    """Overlap count, Sx, Sy, Sxx, Syy, Sxy for every (column of a, column of b).

    Each is one GEMM of masks and zero-filled data; a side without a mask needs column sums only.
    """
    shape = (a.cols.size, b.cols.size)
    if a.M is None:
        return (np.broadcast_to(b.M.sum(axis=0), shape), a.Z.T @ b.M,
                np.broadcast_to(b.Z.sum(axis=0), shape), (a.Z * a.Z).T @ b.M,
                np.broadcast_to(b.Z2.sum(axis=0), shape), a.Z.T @ b.Z)
    if b.M is None:
        count, sy, sx, syy, sxx, sxy = _masked_sums(b, a)
        return count.T, sx.T, sy.T, sxx.T, syy.T, sxy.T
    return a.M.T @ b.M, a.Z.T @ b.M, a.M.T @ b.Z, a.Z2.T @ b.M, a.M.T @ b.Z2, a.Z.T @ b.Z


def _masked_sums_diagonal(a: _Block) -> tuple[np.ndarray, ...]:
    """Count, Sx, Sxx, Sxy of a block against itself; Sy = Sx^T and Syy = Sxx^T by symmetry.

    M^T M and Z^T Z use numpy's symmetric (a.T @ a) kernel, so this costs about three GEMMs, not six.
    """
    return a.M.T @ a.M, a.Z.T @ a.M, a.Z2.T @ a.M, a.Z.T @ a.Z


def _block_pair_r(a: _Block, b: _Block) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(r, overlap count, needs-exact mask) for every column of block a against every column of b."""
    if a.M is None and b.M is None:
        # One GEMM; the column sums (zero up to the rounding of the centring) make the rest exact.
        sxy = a.Z.T @ a.Z if a is b else a.Z.T @ b.Z   # a.T @ a lets numpy use the symmetric kernel
        count = np.full(sxy.shape, float(a.Z.shape[0]))
        sx, sy, sxx, syy = a.s[:, None], b.s[None, :], a.ss[:, None], b.ss[None, :]
    elif a is b:
        count, sx, sxx, sxy = _masked_sums_diagonal(a)
        sy, syy = sx.T, sxx.T
    else:
        count, sx, sy, sxx, syy, sxy = _masked_sums(a, b)
    r, refine = _pearson_from_sums(count, sx, sy, sxx, syy, sxy, sxx, syy)
    return r, count, refine


class _TopK:
    """The `top` largest |r| seen so far, kept in arrays of bounded size."""

    def __init__(self, top: int) -> None:
        self.top = top
        self.i = np.empty(0, dtype=np.int64)
        self.j = np.empty(0, dtype=np.int64)
        self.r = np.empty(0)
        self.n = np.empty(0, dtype=np.int64)

    def offer(self, i: np.ndarray, j: np.ndarray, r: np.ndarray, n: np.ndarray) -> None:
        if self.top == 0 or r.size == 0:
            return
        ii, jj = np.concatenate([self.i, i]), np.concatenate([self.j, j])
        rr, nn = np.concatenate([self.r, r]), np.concatenate([self.n, n])
        if rr.size > self.top:
            keep = np.argpartition(-np.abs(rr), self.top - 1)[: self.top]
            ii, jj, rr, nn = ii[keep], jj[keep], rr[keep], nn[keep]
        self.i, self.j, self.r, self.n = ii, jj, rr, nn

    def pairs(self) -> list[Pair]:
        order = np.lexsort((self.j, self.i, -np.abs(self.r)))
        return [Pair(int(self.i[k]), int(self.j[k]), float(self.r[k]), int(self.n[k])) for k in order]


def _scan_order(A: np.ndarray, min_overlap: int) -> tuple[np.ndarray, _Summary]:
    """Columns worth scanning (>= min_overlap present values, not constant), complete ones first;
    and the column summary of all of A."""
    sm = _summarise(A)
    usable = (sm.count >= max(min_overlap, 3)) & ~sm.constant
    complete = sm.count == A.shape[0]
    return np.concatenate([np.flatnonzero(usable & complete), np.flatnonzero(usable & ~complete)]), sm


def top_pairs(X: np.ndarray, top: int, *, min_overlap: int = 3, block: int | None = None) -> PairScan:
    """The ``top`` pairs of columns (i < j) of ``X`` (n, m) with the largest pairwise-complete |r|.

    Works on column blocks of width ``block`` (by default as wide as ``_PAIR_BYTES`` allows for two
    prepared blocks, at least 256; complete columns are grouped first): a block pair whose
    columns are all complete costs one GEMM of centred columns; otherwise masked GEMMs give
    the overlap sums (three when one side is complete, three on a diagonal block, six otherwise).
    Only the current best ``top`` pairs are kept and two prepared blocks are alive at a time, so
    memory is O(n * block + block^2 + top), never O(m^2) nor a copy of X. Each off-diagonal block
    is re-centred when it is visited (about 1/block of the GEMM work).
    Pairs whose overlap is shorter than ``min_overlap`` (at least 3) or constant are not tested.
    P-values are left to the caller (``p_values`` with each pair's n or an effective n).
    """
    if top < 0 or (block is not None and block < 1):
        raise ValueError("top must be >= 0 and block >= 1")
    A = _as_matrix(X)
    m = A.shape[1]
    order, summary = _scan_order(A, min_overlap)
    if block is None:
        arrays = 1 if bool((summary.count == A.shape[0]).all()) else 3
        block = max(256, _PAIR_BYTES // (2 * arrays * 8 * max(A.shape[0], 1)))
        block = -(-max(order.size, 1) // -(-max(order.size, 1) // block))   # equal widths, same count
    keep = _TopK(top)
    tested = 0
    blocks = [order[s: s + block] for s in range(0, order.size, block)]
    scratch = _Scratch(A.shape[0])
    for ka, cols_a in enumerate(blocks):
        a = _prepare_block(A, cols_a, summary, scratch, "a")
        tested += _scan_block_pair(A, a, a, min_overlap, keep)
        for cols_b in blocks[ka + 1:]:
            b = _prepare_block(A, cols_b, summary, scratch, "b")
            tested += _scan_block_pair(A, a, b, min_overlap, keep)
    return PairScan(pairs=keep.pairs(), tested=tested, undefined=m * (m - 1) // 2 - tested)


def _scan_block_pair(A: np.ndarray, a: _Block, b: _Block, min_overlap: int, keep: _TopK) -> int:
    """Offer one block pair's defined correlations to ``keep``; return how many were defined."""
    r, count, refine = _block_pair_r(a, b)
    gi = np.broadcast_to(a.cols[:, None], r.shape)
    gj = np.broadcast_to(b.cols[None, :], r.shape)
    # Blocks hold disjoint columns, so every entry of an off-diagonal block pair is a distinct pair;
    # a diagonal block contributes its strict upper triangle. Indices are put in i < j order below.
    wanted = np.triu(np.ones(r.shape, dtype=bool), 1) if a is b else np.ones(r.shape, dtype=bool)
    ok = wanted & (np.rint(count) >= min_overlap)
    redo = ok & refine
    if redo.any():
        pa, pb = np.nonzero(redo)
        r[pa, pb] = _refine_pairs(a.cols[pa], b.cols[pb], A, A)
    ok &= ~np.isnan(r)
    pa, pb = np.nonzero(ok)
    i, j = gi[pa, pb], gj[pa, pb]
    lo, hi = np.minimum(i, j), np.maximum(i, j)
    vals = r[pa, pb]
    if vals.size > keep.top > 0:
        sel = np.argpartition(-np.abs(vals), keep.top - 1)[: keep.top]
        lo, hi, vals, pa, pb = lo[sel], hi[sel], vals[sel], pa[sel], pb[sel]
    keep.offer(lo, hi, vals, np.rint(count[pa, pb]).astype(np.int64))
    return int(ok.sum())
