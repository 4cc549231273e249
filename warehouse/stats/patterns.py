"""Patterns in one counter series: autocorrelation, periods, episodes above a threshold, level shifts.

Inputs are 1-D float arrays on a regular grid (spacing ``dt`` seconds); NaN marks a missing bucket.
Everything here is a pure function of NumPy arrays (numpy/scipy only, no I/O).

Methods, by their published names:

* **Autocorrelation** as defined for the NIST StRD univariate sets and by ``statsmodels``' ``acf``:
  ``r_k = sum_t (x_t - m)(x_{t+k} - m) / sum_t (x_t - m)^2`` over the whole series.
* **Periods** (:func:`find_periods`): a Hann-tapered periodogram (Lomb-Scargle on the same
  frequency grid when more than 20% of the buckets are missing), each peak tested against a
  red-noise AR(1) background (Torrence & Compo 1998) with a family-wise correction over the
  frequencies searched in the spirit of Fisher's g test (Fisher 1929), then confirmed on the ACF
  (positive at the period, and higher there than at half the period).
* **Level shifts** (:func:`change_points`): binary segmentation for changes in the mean with a
  BIC-type penalty, scaled for AR(1) noise.

Errors for unusable input (constant, too short, bad arguments) are ``ValueError`` with a one-line
message that the caller can show as is.
"""
from __future__ import annotations

import heapq
import math
from dataclasses import dataclass, field
from statistics import NormalDist

import numpy as np
from scipy import fft as sfft
from scipy import optimize, signal

__all__ = [
    "ChangePoint",
    "Period",
    "acf",
    "autocorrelation",
    "change_points",
    "default_penalty",
    "episodes",
    "find_periods",
    "noise_scale",
    "period_label",
]

SECONDS_PER_YEAR = 365.25 * 86400.0
MIN_PRESENT = 16            # fewer present values than this: no spectrum worth testing
MIN_CYCLES = 3.0            # a period must repeat at least this often inside the series
GAPPED_FRACTION = 0.20      # above this share of missing buckets: Lomb-Scargle instead of filling
_DIRECT_LAGS = 64           # acf: direct dot products up to this many lags, FFT beyond
_FIT_BINS = 4096            # background fit: at most this many periodogram bins in the r search
_MAX_HARMONIC = 32          # harmonics k = 2 .. this are grouped with their fundamental
_LOBE = 2                   # Hann main lobe half-width in bins: a line's power lies within +-2 bins
_LEAK_MARGIN = 10.0         # a side peak must beat the Hann leakage envelope by this factor
_SIDE_SPAN = 0.30           # a peak within 30% of a stronger period's frequency ...
_SIDE_POWER = 0.10          # ... and with less than 1/10 of its power is a side peak of it
_MAD_TO_SD = 0.6745         # MAD of a normal sample / its standard deviation (Phi^-1(0.75), from memory)


# --------------------------------------------------------------------------- input checks


def _vector(x: np.ndarray) -> np.ndarray:
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1:
        raise ValueError(f"expected a 1-D series, got an array of shape {a.shape}")
    if np.isinf(a).any():
        raise ValueError("series has infinite values")
    return a


def _present_values(a: np.ndarray, need: int) -> np.ndarray:
    """The non-NaN values; ValueError when fewer than ``need`` or all equal."""
    v = a[~np.isnan(a)]
    if v.size < need:
        raise ValueError(f"series too short: {v.size} present values, need at least {need}")
    if v.max() == v.min():
        raise ValueError("series is constant: there is no variation to analyse")
    return v


def _accurate_mean(v: np.ndarray) -> float:
    """Mean with one correction pass (removes the rounding error of the first sum)."""
    m = float(v.mean())
    return m + float((v - m).mean())


# --------------------------------------------------------------------------- autocorrelation


@dataclass(frozen=True)
class _Deviations:
    d: np.ndarray       # x - mean, 0.0 where missing
    ss: float           # sum of d^2 over the present values


def _deviations(a: np.ndarray) -> _Deviations:
    v = _present_values(a, 2)
    present = ~np.isnan(a)
    d = np.where(present, a - _accurate_mean(v), 0.0)
    return _Deviations(d, float(np.dot(d, d)))


def _lag_ratio(dev: _Deviations, lag: int) -> float:
    d = dev.d
    return float(np.dot(d[: d.size - lag], d[lag:])) / dev.ss


def _check_lag(lag: int, n: int, name: str) -> int:
    k = int(lag)
    if k != lag or k < 0:
        raise ValueError(f"{name} must be a non-negative integer, got {lag!r}")
    if k >= n:
        raise ValueError(f"{name} {k} is not shorter than the series ({n} buckets)")
    return k


def autocorrelation(x: np.ndarray, lag: int) -> float:
    """Autocorrelation at one lag: ``sum_t d_t d_{t+lag} / sum_t d_t^2`` with ``d = x - mean(x)``.

    This is the NIST StRD r(1) definition (no n/(n-k) factor) and ``statsmodels`` ``acf``.
    With NaN in ``x``: the mean and the denominator use every present value, and the numerator
    sums over the pairs whose two buckets are both present. Missing pairs are not re-weighted,
    so random gaps pull the value towards 0 by about the share of pairs lost.
    ValueError for a constant series, fewer than 2 present values, or ``lag >= len(x)``.
    """
    a = _vector(x)
    k = _check_lag(lag, a.size, "lag")
    dev = _deviations(a)
    return 1.0 if k == 0 else _lag_ratio(dev, k)


def acf(x: np.ndarray, nlags: int) -> np.ndarray:
    """Autocorrelations at lags 0..nlags, same definition (and NaN rule) as :func:`autocorrelation`.

    Direct dot products for up to 64 lags, an FFT of the zero-padded deviations beyond that.
    """
    a = _vector(x)
    m = _check_lag(nlags, a.size, "nlags")
    dev = _deviations(a)
    if m <= _DIRECT_LAGS:
        out = np.array([_lag_ratio(dev, k) for k in range(m + 1)])
    else:
        nfft = sfft.next_fast_len(2 * a.size - 1, real=True)
        spec = sfft.rfft(dev.d, nfft)
        out = sfft.irfft(spec.real**2 + spec.imag**2, nfft)[: m + 1] / dev.ss
    out[0] = 1.0
    return out


# --------------------------------------------------------------------------- period labels


_UNITS: tuple[tuple[str, str, float, float], ...] = (
    # singular, plural, seconds per unit, use this unit below this many seconds
    ("s", "s", 1.0, 100.0),
    ("min", "min", 60.0, 100.0 * 60.0),
    ("h", "h", 3600.0, 22.0 * 3600.0),
    ("day", "days", 86400.0, 330.0 * 86400.0),
    ("year", "years", SECONDS_PER_YEAR, math.inf),
)


def period_label(seconds: float) -> str:
    """Human period: "45 s", "11 min", "6 h", "1 day", "7 days", "11 years" (a year is 365.25 days).

    Values of 10 or more are rounded to whole units, smaller ones to one decimal.
    """
    if not math.isfinite(seconds) or seconds <= 0:
        raise ValueError(f"period must be a positive number of seconds, got {seconds!r}")
    for one, many, unit, below in _UNITS:
        if seconds < below:
            break
    value = seconds / unit
    text = f"{value:.0f}" if value >= 10 else f"{value:.1f}".removesuffix(".0")
    return f"{text} {one if text == '1' else many}"


# --------------------------------------------------------------------------- spectrum


@dataclass(frozen=True)
class _Spectrum:
    power: np.ndarray       # at bins k = 0 .. n//2, frequency k/n cycles per bucket
    n: int                  # grid length (bins are 1/n apart)


def _detrended(a: np.ndarray, present: np.ndarray) -> np.ndarray:
    """``a`` minus its least-squares straight line fitted to the present values (NaN kept)."""
    t = np.flatnonzero(present).astype(np.float64)
    v = a[present]
    tc = t - t.mean()
    slope = float(np.dot(tc, v - v.mean()) / np.dot(tc, tc))
    line = v.mean() + slope * (np.arange(a.size) - t.mean())
    out = a - line
    return out - np.nanmean(out)


def _filled(d: np.ndarray, present: np.ndarray) -> np.ndarray:
    """Missing buckets filled by linear interpolation between their present neighbours."""
    if present.all():
        return d
    idx = np.arange(d.size)
    return np.interp(idx, idx[present], d[present])


def _hann_periodogram(d: np.ndarray) -> np.ndarray:
    _, power = signal.periodogram(d, fs=1.0, window="hann", detrend=False, scaling="density")
    return power


def _gapped_lomb_scargle(d: np.ndarray, present: np.ndarray) -> np.ndarray:
    """Weighted Lomb-Scargle power at the Fourier frequencies k/n, k = 0..n//2, by FFTs.

    The weights are a Hann taper over the grid (0 at missing buckets). For each frequency w this is
    the reduction of ``sum_t w_t (y_t - a cos wt - b sin wt)^2`` by the best (a, b), i.e. the
    Lomb-Scargle statistic (Lomb 1976, Scargle 1982) with the time offset tau chosen so that the
    cosine and sine terms are orthogonal under the weights. On a regular grid all the sums it
    needs are DFTs: of ``w*y`` at w, and of ``w`` at 2w. Halved, as in the classical form.
    """
    n = d.size
    w = np.where(present, signal.get_window("hann", n), 0.0)
    y = np.where(present, d, 0.0)
    y = y - np.dot(w, y) / w.sum()
    u = sfft.rfft(w * y)
    v = sfft.fft(w)
    k = np.arange(n // 2 + 1)
    v2 = v[(2 * k) % n]
    c, s = u.real, -u.imag                      # sum w y cos wt, sum w y sin wt
    c2, s2 = v2.real, -v2.imag                  # sum w cos 2wt, sum w sin 2wt
    half = 0.5 * np.arctan2(s2, c2)             # w * tau
    yc = c * np.cos(half) + s * np.sin(half)
    ys = s * np.cos(half) - c * np.sin(half)
    total = w.sum()
    rot = np.hypot(c2, s2)
    cc = 0.5 * (total + rot)
    ss = 0.5 * (total - rot)
    with np.errstate(divide="ignore", invalid="ignore"):
        sin_part = np.where(ss > 1e-9 * total, ys**2 / ss, 0.0)
    return 0.5 * (yc**2 / cc + sin_part)


def _spectrum(d: np.ndarray, present: np.ndarray) -> _Spectrum:
    missing = 1.0 - present.mean()
    if missing > GAPPED_FRACTION:
        return _Spectrum(_gapped_lomb_scargle(d, present), d.size)
    return _Spectrum(_hann_periodogram(_filled(d, present)), d.size)


# --------------------------------------------------------------------------- AR(1) background


@dataclass(frozen=True)
class _Background:
    r: float                # AR(1) coefficient of the fitted red-noise shape
    scale: float            # power = scale * shape has Exp(1)-distributed ratios

    def at(self, omega: np.ndarray) -> np.ndarray:
        return self.scale * _ar1_shape(self.r, omega)


def _ar1_shape(r: float, omega: np.ndarray) -> np.ndarray:
    """AR(1) spectrum, unit variance: (1 - r^2) / (1 + r^2 - 2 r cos w) (standard result, from memory)."""
    return (1.0 - r * r) / (1.0 + r * r - 2.0 * r * np.cos(omega))


def _log_fit_loss(r: float, log_power: np.ndarray, cos_w: np.ndarray) -> float:
    """Mean absolute deviation of log power from the best-located log AR(1) shape."""
    resid = log_power - (math.log1p(-r * r) - np.log(1.0 + r * r - 2.0 * r * cos_w))
    return float(np.mean(np.abs(resid - np.median(resid))))


def _fit_bins(spec: _Spectrum) -> np.ndarray:
    """Bins used to fit the background: 2 .. n/2, without Nyquist (bins 0, 1: mean, linear trend;
    Nyquist: chi-square with 1 d.f.)."""
    return np.arange(2, spec.power.size - (1 if spec.n % 2 == 0 else 0))


def _fit_ar1(power: np.ndarray, omega: np.ndarray) -> _Background:
    """Least-absolute-deviation fit of ``log(scale * AR(1) shape)`` to log power at ``omega``."""
    floor = max(float(power.max()) * 1e-15, np.finfo(np.float64).tiny)
    log_power = np.log(np.maximum(power, floor))
    step = max(1, power.size // _FIT_BINS)
    lp, cw = log_power[::step], np.cos(omega[::step])
    grid = np.tanh(np.linspace(np.arctanh(-0.95), np.arctanh(0.999), 61))
    losses = [_log_fit_loss(r, lp, cw) for r in grid]
    i = int(np.argmin(losses))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    best = optimize.minimize_scalar(_log_fit_loss, bounds=(lo, hi), args=(lp, cw), method="bounded",
                                    options={"xatol": 1e-5})
    r = float(best.x) if best.fun <= losses[i] else float(grid[i])
    log_shape = math.log1p(-r * r) - np.log(1.0 + r * r - 2.0 * r * np.cos(omega))
    scale = math.exp(float(np.median(log_power - log_shape))) / math.log(2.0)
    return _Background(r, scale)


def _fit_background(spec: _Spectrum, alpha: float) -> _Background:
    """Fit ``scale * AR(1) shape`` to the periodogram, robustly, in the log domain, without its lines.

    Not from the series' own r1 and variance: a strong rhythm (a daily cycle, a level shift)
    dominates both, so r1 then describes the rhythm rather than the noise, and the background is
    wrong on both sides -- below white noise at high frequencies (noise bins pass as periods) and
    above it near the rhythm (weaker lines are missed). In development, an afternoon bump plus an
    11-min pulse over white noise gave 1-3 spurious peaks with that background and none with this
    fit, which also found more of the true harmonics.

    Log power is fitted by least absolute deviations: r by a grid plus bounded search (on at most
    4096 evenly spaced bins), the log scale as the median residual. Under the null the ratio
    power/(scale*shape) is Exp(1), whose median is ln 2; the scale is set so that the fitted
    ratio has that median. A median ignores a few lines, but not a business-hours rhythm whose
    harmonics and weekday/weekend side bands can cover a third of the bins; so the fit is
    repeated (at most 5 times) without the bins within +-2 of any bin whose family-wise p (over
    all fitted bins) is below alpha, until that set stops changing.
    """
    k = _fit_bins(spec)
    omega = 2.0 * np.pi * k / spec.n
    power = spec.power[k]
    keep = np.ones(k.size, dtype=bool)
    bg = _fit_ar1(power, omega)
    for _ in range(5):
        lines = _family_p(power / bg.at(omega), k.size) < alpha
        if not lines.any():
            break
        near = np.convolve(lines, np.ones(2 * _LOBE + 1, dtype=bool), mode="same").astype(bool)
        if np.array_equal(~near, keep) or (~near).sum() < max(MIN_PRESENT, k.size // 4):
            break
        keep = ~near
        bg = _fit_ar1(power[keep], omega[keep])
    return bg


def _family_p(ratio: np.ndarray, tests: int) -> np.ndarray:
    """P(the largest of ``tests`` independent Exp(1) ratios exceeds ``ratio``): 1 - (1 - e^-R)^M.

    This is the known-scale form of Fisher's g test (the exact g distribution with its scale
    estimated from the same periodogram tends to it when M is large). Adjacent Hann bins are
    correlated, so counting every bin as a test makes it conservative.
    """
    single = np.exp(-np.maximum(ratio, 0.0))
    return -np.expm1(tests * np.log1p(-np.minimum(single, 1.0 - 1e-16)))


# --------------------------------------------------------------------------- peaks


@dataclass
class _Line:
    bin: float              # refined position in bins (frequency = bin / n cycles per bucket)
    k: int                  # periodogram bin of the peak
    power: float
    p: float
    harmonics: list["_Line"] = field(default_factory=list)


def _refined_bin(log_power: np.ndarray, k: int) -> float:
    """Peak position by a parabola through log power at k-1, k, k+1 (Gaussian interpolation)."""
    if k <= 0 or k >= log_power.size - 1:
        return float(k)
    a, b, c = log_power[k - 1], log_power[k], log_power[k + 1]
    den = a - 2.0 * b + c
    if den >= 0.0:
        return float(k)
    return k + float(np.clip(0.5 * (a - c) / den, -0.5, 0.5))


def _hann_leakage(distance: float) -> float:
    """Upper envelope of the Hann window's power response ``distance`` bins from a line.

    |W(D)| / |W(0)| = |sinc(D) / (1 - D^2)| for the Hann window (standard result, from memory);
    bounded by 1 / (pi D (D^2 - 1)) for D > 1.
    """
    return (1.0 / (math.pi * distance * (distance * distance - 1.0))) ** 2


def _is_side_peak(cand: _Line, fundamentals: list[_Line]) -> bool:
    """Close to a much stronger period (modulation, drift, a broad peak's shoulder)."""
    return any(
        abs(cand.bin - f.bin) <= _SIDE_SPAN * f.bin and cand.power < _SIDE_POWER * f.power
        for f in fundamentals
    )


def _is_leakage(cand: _Line, lines: list[_Line]) -> bool:
    for line in lines:
        dist = abs(cand.bin - line.bin)
        if dist <= _LOBE:
            return True
        if cand.power < _LEAK_MARGIN * _hann_leakage(dist) * line.power:
            return True
    return False


def _harmonic_order(cand: _Line, fundamental: _Line, n: int) -> int:
    """k if ``cand`` sits at k times the fundamental's frequency: 2 <= k <= 32, k f below Nyquist,
    within 1 + 0.05 k bins (the refined fundamental is good to a few hundredths of a bin, times k).

    Harmonics folded back from above Nyquist are not followed: at high k they match unrelated
    peaks by chance.
    """
    for k in range(2, _MAX_HARMONIC + 1):
        target = k * fundamental.bin
        if target > n / 2:
            break
        if abs(cand.bin - target) <= 1.0 + 0.05 * k:
            return k
    return 0


def _candidates(spec: _Spectrum, ratio: np.ndarray, band: np.ndarray, alpha: float) -> list[_Line]:
    """Local maxima of power inside the band whose family-wise p < alpha, strongest first."""
    power = spec.power
    right = power[np.minimum(band + 1, power.size - 1)]
    kk = band[(power[band] > power[band - 1]) & (power[band] >= right)]
    p = _family_p(ratio[kk], band.size)
    keep = p < alpha
    kk, p = kk[keep], p[keep]
    order = np.argsort(-power[kk], kind="stable")
    floor = max(float(power.max()) * 1e-300, np.finfo(np.float64).tiny)
    log_power = np.log(np.maximum(power, floor))
    return [_Line(_refined_bin(log_power, int(kk[i])), int(kk[i]), float(power[kk[i]]), float(p[i]))
            for i in order]


def _band(n: int, dt: float, min_period: float, max_period: float) -> np.ndarray:
    """Periodogram bins with min_period <= period <= max_period and at least 3 cycles in the series."""
    lo = max(2, math.ceil(n * dt / max_period - 1e-9), math.ceil(MIN_CYCLES))
    top = n // 2 - (1 if n % 2 == 0 else 0)      # Nyquist bin excluded
    hi = min(top, math.floor(n * dt / min_period + 1e-9))
    return np.arange(lo, hi + 1)


def _lobe_power(power: np.ndarray, lines: list[_Line]) -> float:
    """Total power in the main lobes (+-2 bins) of the given lines, each bin counted once."""
    mask = np.zeros(power.size, dtype=bool)
    for line in lines:
        mask[max(line.k - _LOBE, 1): line.k + _LOBE + 1] = True
    return float(power[mask].sum())


# --------------------------------------------------------------------------- find_periods


@dataclass(frozen=True)
class Period:
    """One periodic pattern.

    ``seconds``: the fundamental period; ``label``: the same in human terms; ``strength``: share of
    the (detrended) variance in the periodogram lobes of the fundamental and its harmonics;
    ``p``: family-wise p-value of the fundamental against the AR(1) background over the
    frequencies searched; ``harmonics``: periods (seconds, longest first) of the significant peaks
    at 2, 3, ... times its frequency; ``acf``: autocorrelation of the detrended series at the lag
    nearest to the period (always > 0, and above the value at half the period: other findings
    are dropped, see :func:`find_periods` step 7).
    """

    seconds: float
    label: str
    strength: float
    p: float
    harmonics: tuple[float, ...]
    acf: float


def _check_period_args(dt: float, min_period: float, max_period: float, alpha: float, max_found: int) -> None:
    if not (math.isfinite(dt) and dt > 0):
        raise ValueError(f"dt must be a positive number of seconds, got {dt!r}")
    if not (math.isfinite(min_period) and math.isfinite(max_period) and 0 < min_period < max_period):
        raise ValueError(f"need 0 < min_period < max_period, got {min_period!r} and {max_period!r}")
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be between 0 and 1, got {alpha!r}")
    if max_found < 1:
        raise ValueError(f"max_found must be at least 1, got {max_found!r}")


def _acf_confirms(dev: _Deviations, period_bins: float, z: float = 3.0) -> float | None:
    """ACF at the lag nearest the period if it confirms a cycle, else None.

    A cycle makes the series more alike one period apart than half a period apart: with a share f
    of the variance in the cycle, r(P) is about f and r(P/2) about -f. The low-frequency power of
    a level shift or a bend in the trend gives an ACF that only decays, and noise gives two values
    that differ by chance (each with standard error 1/sqrt(n)). Confirmed when r(P) > 0 and
    r(P) - r(P/2) > z * sqrt(2/n); the caller sets z for the number of candidates it checks.
    (A period of one bucket has no half lag: then r(P) > z/sqrt(n).)
    """
    n = dev.d.size
    lag = int(round(period_bins))
    if not 0 < lag < n:
        return None
    r = _lag_ratio(dev, lag)
    half = max(1, int(round(period_bins / 2.0)))
    se = 1.0 / np.sqrt(max(int(np.count_nonzero(dev.d)), 1))
    if r <= 0.0:
        return None
    if half < lag:
        if r - _lag_ratio(dev, half) <= z * np.sqrt(2.0) * se:
            return None
    elif r <= z * se:
        return None
    return r


def _fold(d: np.ndarray, present: np.ndarray, period_bins: float) -> np.ndarray:
    """The cycle's average shape (mean at each phase) laid along the series; 0 where missing.

    Phases are ``round(period)`` slots of the (possibly fractional) period, so the fundamental and
    all its harmonics are caught at once whatever the shape (a square office-hours rhythm as well
    as a sine)."""
    slots = max(2, int(round(period_bins)))
    # A period known only to within half a Fourier bin (P^2 / 2n buckets) is folded on the nearest
    # whole number of buckets when that lies inside: a fractional estimate of a whole-bucket rhythm
    # would slide the folded shape along the series and leave its sharp edges in the rest.
    if abs(period_bins - slots) <= period_bins * period_bins / (2.0 * d.size):
        period_bins = float(slots)
    phase = np.minimum((np.floor((np.arange(d.size) % period_bins) / period_bins * slots)).astype(np.int64),
                       slots - 1)
    total = np.bincount(phase, weights=np.where(present, d, 0.0), minlength=slots)
    count = np.bincount(phase, weights=present, minlength=slots)
    shape = np.divide(total, count, out=np.zeros(slots), where=count > 0)
    return np.where(present, shape[phase], 0.0)


def _without_cycles(dev: _Deviations, periods_bins: list[float], sweeps: int = 3) -> _Deviations:
    """The deviations with the average shapes of all these cycles taken out, fitted jointly.

    Each shape is refitted on the series minus the others (backfitting, a few sweeps): a shape
    estimated alone also picks up part of every other cycle (a 137-bucket cycle does not average
    out over 30 days of a 1,440-bucket fold), and that part would be left behind as a spurious
    correlation at every short lag."""
    d = dev.d
    present = d != 0.0
    shapes = [np.zeros_like(d) for _ in periods_bins]
    for _ in range(sweeps if len(periods_bins) > 1 else 1):
        for i, period in enumerate(periods_bins):
            others = sum((shapes[j] for j in range(len(shapes)) if j != i), np.zeros_like(d))
            shapes[i] = _fold(d - others, present, period)
    r = np.where(present, d - sum(shapes, np.zeros_like(d)), 0.0)
    if present.any():
        r = np.where(present, r - r[present].mean(), 0.0)
    return _Deviations(r, float(np.dot(r, r)))


def _select(cands: list[_Line], dev: _Deviations, n: int, max_found: int,
            alpha: float = 0.01) -> list[tuple[_Line, float]]:
    """Fundamentals in order of power, each with its ACF; then every other line grouped as harmonic.

    Pass 1: a candidate that is leakage of a stronger accepted line, a harmonic of a stronger
    fundamental, or a side peak of one is skipped; otherwise it becomes a fundamental if the ACF
    confirms it (see ``_acf_confirms``) and is dropped if not. The ACF is taken on the series with
    the cycles already found taken out (``_without_cycles``): a strong daily rhythm makes the raw
    series alike at every lag of a few hours, which would hide a weaker two-hour cycle.
    Each check is a one-sided test of an autocorrelation against white noise, at level
    alpha / (number of candidates) (Bonferroni), but never below 3 standard errors.
    Pass 2: every significant line that is not a fundamental is attached to the first (strongest)
    fundamental it is a harmonic of, so a harmonic that came before its fundamental still counts
    for strength.
    """
    chosen: list[tuple[_Line, float]] = []
    accepted: list[_Line] = []
    rest = dev
    z = max(3.0, NormalDist().inv_cdf(1.0 - alpha / max(len(cands), 1)))
    for cand in cands:
        if len(chosen) >= max_found:
            break
        if _is_leakage(cand, accepted) or any(_harmonic_order(cand, f, n) for f, _ in chosen):
            accepted.append(cand)
            continue
        if _is_side_peak(cand, [f for f, _ in chosen]):
            continue
        r = _acf_confirms(rest, n / cand.bin, z)
        if r is not None:
            chosen.append((cand, r))
            accepted.append(cand)
            rest = _without_cycles(dev, [n / f.bin for f, _ in chosen])
    fundamentals = {id(f) for f, _ in chosen}
    for cand in cands:
        if id(cand) in fundamentals:
            continue
        for f, _ in chosen:
            if _harmonic_order(cand, f, n) and not _is_leakage(cand, [f, *f.harmonics]):
                f.harmonics.append(cand)
                break
    return chosen


def find_periods(
    x: np.ndarray,
    dt: float,
    *,
    min_period: float,
    max_period: float,
    alpha: float = 0.01,
    max_found: int = 5,
) -> list[Period]:
    """Periodic patterns with period in [min_period, max_period] seconds, strongest first.

    1. Remove the least-squares line (present values only).
    2. Spectrum: Hann-tapered periodogram (``scipy.signal.periodogram``; up to 20% missing buckets
       filled by linear interpolation), or, with more than 20% missing, the weighted Lomb-Scargle
       power on the same Fourier grid (Hann weights; see ``_gapped_lomb_scargle``). The taper keeps
       a strong line from leaking into far bins (Hann side lobes fall as 1/D^6 in power, boxcar's
       as 1/D^2), so one daily rhythm does not turn into a comb of false neighbours.
    3. Background: a red-noise AR(1) spectrum (Torrence & Compo 1998) fitted robustly to the
       periodogram with its significant lines left out (see ``_fit_background``). Each bin's
       ratio power/background is Exp(1) (chi2_2 / 2) under the null.
    4. Test: p = 1 - (1 - exp(-ratio))^M over the M bins searched (periods from min_period to
       max_period, at least 3 cycles in the series) -- Fisher's g test in its known-scale form,
       i.e. a family-wise correction for searching M frequencies. Peaks with p < alpha count.
    5. Peak frequency refined by Gaussian (log-parabolic) interpolation over 3 bins.
    6. Grouping, by power: a peak inside the Hann leakage envelope of a stronger line is ignored;
       a peak at k times the frequency of a stronger fundamental (k = 2..32, below Nyquist,
       within 1 + 0.05 k bins) is one of its harmonics; a peak with less than 1/10 of the power of
       a stronger period and within 30% of its frequency is a side peak of it (amplitude
       modulation such as quiet weekends around a daily rhythm, drift, the shoulder of a broad
       peak) and is not reported; otherwise it is a new finding if the ACF confirms it:
    7. ACF check on the detrended series with the stronger periods already found taken out (the
       mean at each of their phases): ``acf`` = autocorrelation at the lag nearest the period.
       A finding is dropped when that value is <= 0, or when it does not exceed the
       autocorrelation at the lag nearest half the period by z * sqrt(2/n), z the one-sided normal
       quantile at alpha over the number of candidates (Bonferroni; at least 3): the low-frequency
       power of a level shift or a curved trend passes the spectral test, but its ACF only decays
       (no cycle), and a far harmonic of a rhythm already taken out differs only by chance.

    ``strength`` = power in the lobes (+-2 bins) of the fundamental and its harmonics / total power
    (bins 1..n/2). Limits: periods whose harmonics lie outside [min_period, max_period] are not
    grouped with them; a pulse train with more than 32 strong harmonics (a 1-bucket spike once a
    day) may leave high harmonics unattached; only periods repeating 3 times are searched.
    ValueError: constant series, fewer than 16 present values, or no testable period in the range.
    """
    _check_period_args(dt, min_period, max_period, alpha, max_found)
    a = _vector(x)
    present = ~np.isnan(a)
    _present_values(a, MIN_PRESENT)
    n = a.size
    band = _band(n, dt, min_period, max_period)
    if band.size == 0:
        raise ValueError(
            f"series too short for periods of {period_label(min_period)} to {period_label(max_period)}: "
            f"it spans {period_label(n * dt)} and a period must repeat {MIN_CYCLES:.0f} times"
        )
    d = _detrended(a, present)
    if np.nanmax(np.abs(d)) <= 1e-12 * np.nanmax(np.abs(a - np.nanmean(a))):
        raise ValueError("series is a straight line: there is no variation around the trend")
    dev = _deviations(d)
    spec = _spectrum(d, present)
    bg = _fit_background(spec, alpha)
    omega = 2.0 * np.pi * np.arange(spec.power.size) / n
    ratio = spec.power / bg.at(omega)
    chosen = _select(_candidates(spec, ratio, band, alpha), dev, n, max_found, alpha)
    total = float(spec.power[1:].sum())
    found = [_period(f, r, spec, total, dt) for f, r in chosen]
    return sorted(found, key=lambda p: -p.strength)


def _period(f: _Line, r: float, spec: _Spectrum, total: float, dt: float) -> Period:
    seconds = spec.n * dt / f.bin
    harmonics = tuple(spec.n * dt / h.bin for h in sorted(f.harmonics, key=lambda h: h.bin))
    return Period(
        seconds=seconds,
        label=period_label(seconds),
        strength=_lobe_power(spec.power, [f, *f.harmonics]) / total,
        p=f.p,
        harmonics=harmonics,
        acf=r,
    )


# --------------------------------------------------------------------------- episodes


def episodes(
    x: np.ndarray,
    times_us: np.ndarray,
    threshold: float,
    *,
    gap_buckets: int,
    bucket_us: int,
) -> list[dict]:
    """Runs of buckets with ``x > threshold``, merged across short gaps.

    NaN is never above the threshold. Two runs separated by fewer than ``gap_buckets`` buckets that
    are not above (below, equal, or missing) become one episode; ``gap_buckets=0`` or ``1`` never
    merges. Each episode is a dict:
    ``start_us`` (start of its first bucket), ``end_us`` (exclusive: start of its last above bucket
    + ``bucket_us``), ``buckets`` (buckets spanned, first to last inclusive, gaps included),
    ``above`` (buckets above the threshold) and ``peak`` (largest value). ``times_us`` holds each
    bucket's start time; it must have the same length as ``x``.
    """
    a = _vector(x)
    t = np.asarray(times_us, dtype=np.int64)
    if t.shape != a.shape:
        raise ValueError(f"times_us has shape {t.shape}, the series {a.shape}")
    if math.isnan(threshold):
        raise ValueError("threshold is NaN")
    if gap_buckets < 0 or bucket_us <= 0:
        raise ValueError(f"need gap_buckets >= 0 and bucket_us > 0, got {gap_buckets!r} and {bucket_us!r}")
    above = np.zeros(a.size, dtype=bool)
    np.greater(a, threshold, out=above, where=~np.isnan(a))
    runs = _merged_runs(np.flatnonzero(above), gap_buckets)
    return [
        {
            "start_us": int(t[i]),
            "end_us": int(t[j]) + int(bucket_us),
            "buckets": j - i + 1,
            "above": int(above[i: j + 1].sum()),
            "peak": float(np.nanmax(a[i: j + 1])),
        }
        for i, j in runs
    ]


def _merged_runs(idx: np.ndarray, gap_buckets: int) -> list[tuple[int, int]]:
    """(first, last) index of each group of ``idx`` whose steps leave < gap_buckets between them."""
    if idx.size == 0:
        return []
    between = np.diff(idx) - 1                       # non-above buckets between consecutive aboves
    breaks = np.flatnonzero(between >= max(gap_buckets, 1))
    firsts = np.r_[idx[0], idx[breaks + 1]]
    lasts = np.r_[idx[breaks], idx[-1]]
    return [(int(i), int(j)) for i, j in zip(firsts, lasts)]


# --------------------------------------------------------------------------- change points


@dataclass(frozen=True)
class ChangePoint:
    """A change in the mean: ``index`` is the first bucket of the new level.

    ``before_mean`` / ``after_mean`` are the means of the segments on either side of it in the
    final segmentation.
    """

    index: int
    before_mean: float
    after_mean: float


def noise_scale(x: np.ndarray) -> tuple[float, float]:
    """(sigma_d, phi): robust noise scale from first differences and an AR(1) coefficient.

    ``sigma_d = MAD(diff x) / (sqrt(2) * 0.6745)``: the noise standard deviation for white noise
    (a level shift is one outlying difference, so the median ignores it). For AR(1) noise with
    coefficient phi it estimates ``sigma * sqrt(1 - phi)`` (Var(x_t - x_{t-1}) = 2 sigma^2 (1 - phi),
    a standard AR(1) identity, from memory).
    If more than half of the differences are 0 (a mostly flat counter) the MAD is 0 and
    ``sqrt(mean(diff^2) / 2)`` is used instead.

    ``phi``: median, over consecutive blocks of L = clip(n // 8, 16, 256) values, of each block's
    lag-1 autocorrelation (block mean removed, so a level shift disturbs one block only; a flat
    block counts as 0),
    corrected for its small-sample bias with E[r1] ~ phi - (1 + 3 phi) / L (an approximation
    recalled from memory), and clipped to [0, 0.98].
    """
    a = np.asarray(x, dtype=np.float64)
    diff = np.diff(a)
    mad = float(np.median(np.abs(diff - np.median(diff))))
    if mad > 0:
        sigma = mad / (math.sqrt(2.0) * _MAD_TO_SD)
    else:
        sigma = math.sqrt(float(np.mean(diff * diff)) / 2.0)
    return sigma, _block_phi(a)


def _block_phi(a: np.ndarray) -> float:
    L = int(np.clip(a.size // 8, 16, 256))
    nb = a.size // L
    if nb < 1:
        return 0.0
    blocks = a[: nb * L].reshape(nb, L)
    d = blocks - blocks.mean(axis=1, keepdims=True)
    ss = np.einsum("ij,ij->i", d, d)
    num = np.einsum("ij,ij->i", d[:, 1:], d[:, :-1])
    r_blocks = np.divide(num, ss, out=np.zeros(nb), where=ss > 0)   # a flat block: no noise, 0
    r = float(np.median(r_blocks))
    return float(np.clip((r * L + 1.0) / (L - 3.0), 0.0, 0.98))


def default_penalty(x: np.ndarray) -> float:
    """BIC-type penalty on the sum-of-squares scale: ``2 sigma_LR^2 log n``.

    For white noise ``sigma_LR = sigma_d`` (see :func:`noise_scale`) and this is 2 sigma^2 log n,
    BIC's log n for each of the two parameters a change adds (its place and the new mean). For AR(1)
    noise the gain of a split scales with the long-run variance sigma^2 (1 + phi) / (1 - phi);
    because sigma_d^2 = sigma^2 (1 - phi), the factor applied to sigma_d^2 is (1 + phi) / (1 - phi)^2.
    """
    a = np.asarray(x, dtype=np.float64)
    sigma, phi = noise_scale(a)
    return 2.0 * sigma * sigma * math.log(a.size) * (1.0 + phi) / (1.0 - phi) ** 2


def _best_split(cs: np.ndarray, lo: int, hi: int, min_size: int) -> tuple[float, int]:
    """Largest drop in the sum of squares from splitting [lo, hi) at s, and that s."""
    s = np.arange(lo + min_size, hi - min_size + 1)
    if s.size == 0:
        return -math.inf, -1
    n1 = (s - lo).astype(np.float64)
    n2 = (hi - s).astype(np.float64)
    s1 = cs[s] - cs[lo]
    s2 = cs[hi] - cs[s]
    tot = cs[hi] - cs[lo]
    gain = s1 * s1 / n1 + s2 * s2 / n2 - tot * tot / (hi - lo)
    i = int(np.argmax(gain))
    return float(gain[i]), int(s[i])


def change_points(
    x: np.ndarray,
    *,
    penalty: float | None = None,
    min_size: int = 2,
    max_points: int = 10,
) -> list[ChangePoint]:
    """Changes in the mean by binary segmentation, in index order.

    Greedy binary segmentation: of all current segments, the split that lowers the residual sum of
    squares most is made while that drop exceeds ``penalty`` and fewer than ``max_points`` changes
    were made; each segment keeps at least ``min_size`` values. Default penalty: see
    :func:`default_penalty`. The series must be NaN-free (the caller drops missing buckets).
    ValueError: NaN, constant series, or fewer than 2 * min_size values.
    """
    a = _vector(x)
    if np.isnan(a).any():
        raise ValueError("change_points needs a series without missing values: drop them first")
    if min_size < 1 or max_points < 0:
        raise ValueError(f"need min_size >= 1 and max_points >= 0, got {min_size!r} and {max_points!r}")
    _present_values(a, 2 * min_size)
    pen = default_penalty(a) if penalty is None else float(penalty)
    centre = _accurate_mean(a)
    cs = np.concatenate([[0.0], np.cumsum(a - centre)])
    cuts = _binary_segmentation(cs, a.size, pen, min_size, max_points)
    return _with_means(cs, a.size, cuts, centre)


def _binary_segmentation(cs: np.ndarray, n: int, pen: float, min_size: int, max_points: int) -> list[int]:
    heap: list[tuple[float, int, int, int]] = []

    def push(lo: int, hi: int) -> None:
        gain, s = _best_split(cs, lo, hi, min_size)
        if s >= 0:
            heapq.heappush(heap, (-gain, s, lo, hi))

    push(0, n)
    cuts: list[int] = []
    while heap and len(cuts) < max_points:
        neg_gain, s, lo, hi = heapq.heappop(heap)
        if -neg_gain <= pen:
            break
        cuts.append(s)
        push(lo, s)
        push(s, hi)
    return sorted(cuts)


def _with_means(cs: np.ndarray, n: int, cuts: list[int], centre: float) -> list[ChangePoint]:
    """ChangePoints with the means of the segments around each cut (cs: sums of x - centre)."""
    edges = [0, *cuts, n]
    means = [centre + float((cs[b] - cs[a]) / (b - a)) for a, b in zip(edges[:-1], edges[1:])]
    return [ChangePoint(c, means[i], means[i + 1]) for i, c in enumerate(cuts)]
