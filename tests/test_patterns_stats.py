"""Patterns in one series: autocorrelation, periods, episodes, level shifts (warehouse.stats.patterns).

Reference data live in tests/reference/ (see tests/reference/SOURCES.md for where each file comes
from and what was recomputed from it).
"""
from __future__ import annotations

import json
import math
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import signal
from statsmodels.tsa.stattools import acf as sm_acf

from warehouse.stats.patterns import (
    ChangePoint,
    Period,
    _gapped_lomb_scargle,
    acf,
    autocorrelation,
    change_points,
    default_penalty,
    episodes,
    find_periods,
    noise_scale,
    period_label,
)

REFERENCE = Path(__file__).parent / "reference"
NIST = REFERENCE / "nist-strd"
SERIES = REFERENCE / "timeseries"
YEAR = 365.25 * 86400.0
WEEK = 7 * 86400.0
MINUTE = 60.0
DAY_BUCKETS = 1440


# --------------------------------------------------------------------------- helpers


def _csv_column(name: str, column: int) -> np.ndarray:
    """One column of a small CSV (header skipped); empty fields become NaN."""
    rows = (SERIES / name).read_text().splitlines()[1:]
    return np.array([float(r.split(",")[column]) if r.split(",")[column] else math.nan for r in rows])


def _nist(name: str) -> np.ndarray:
    """NIST StRD univariate file: one value per line from line 61."""
    lines = (NIST / name).read_text().splitlines()[60:]
    return np.array([float(v) for v in lines if v.strip()])


def _ar1(rng: np.random.Generator, phi: float, n: int, burn: int = 500) -> np.ndarray:
    return signal.lfilter([1.0], [1.0, -phi], rng.normal(size=n + burn))[burn:]


def _lre(value: float, certified: float) -> float:
    if value == certified:
        return 15.0
    return min(15.0, -math.log10(abs(value - certified) / abs(certified)))


def _planted(seed: int, days: int = 14, shift_at: int = 9 * DAY_BUCKETS + 317, shift: float = 4.0) -> np.ndarray:
    """60-s buckets: 2 min high every 11 min, an afternoon bump each day, AR(1) noise, a level shift."""
    rng = np.random.default_rng(seed)
    t = np.arange(days * DAY_BUCKETS)
    pulse = 3.0 * ((t % 11) < 2)
    hour = (t % DAY_BUCKETS) / 60.0
    daily = 6.0 * np.exp(-0.5 * ((hour - 14.0) / 3.0) ** 2)
    level = np.where(t >= shift_at, shift, 0.0)
    return 20.0 + pulse + daily + _ar1(rng, 0.7, t.size) + level


def _only(periods: list[Period], seconds: float, rel: float) -> Period:
    hits = [p for p in periods if abs(p.seconds - seconds) <= rel * seconds]
    assert len(hits) == 1, periods
    return hits[0]


# --------------------------------------------------------------------------- autocorrelation


@pytest.mark.parametrize("name", ["Lew", "Lottery", "Mavro", "Michelso", "NumAcc1", "NumAcc2",
                                  "NumAcc3", "NumAcc4", "PiDigits"])
def test_lag1_matches_nist_certified(name: str) -> None:
    """NIST StRD univariate sets (certified.json "r1"; NIST ITL Statistical Reference Datasets).

    Reached LRE (digits) for r(1): Lew 14.8, Lottery 14.8, Mavro 13.7, Michelso 13.4, NumAcc1 15,
    NumAcc2 15, NumAcc3 15, NumAcc4 14.8, PiDigits 14.2. Required: within one digit of the best a
    float64 program can reach on these inputs (certified.json "lre_best_possible_from_float64_inputs").
    """
    entry = json.loads((NIST / "certified.json").read_text())["univariate"][name]
    x = _nist(entry["file"])
    assert x.size == entry["n"]
    ceiling = entry["verification"]["lre_best_possible_from_float64_inputs"]["r1"]
    assert _lre(autocorrelation(x, 1), entry["certified"]["r1"]) >= min(ceiling, 15.0) - 1.0
    assert acf(x, 1)[1] == autocorrelation(x, 1)


def test_acf_equals_statsmodels_on_reference_and_long_series() -> None:
    """statsmodels.tsa.stattools.acf (default: adjusted=False, fft=True): equal to 1e-10.

    Both of our paths: direct dot products (<= 64 lags) and the FFT (more lags).
    """
    rng = np.random.default_rng(11)
    cases = [_nist("Lew.dat"), _nist("PiDigits.dat"), _nist("NumAcc4.dat"),
             _csv_column("sunspots.csv", 1), np.cumsum(rng.normal(size=5000)), _ar1(rng, 0.9, 3000)]
    for x in cases:
        for nlags in (1, 40, min(x.size - 1, 700)):
            np.testing.assert_allclose(acf(x, nlags), sm_acf(x, nlags=nlags), rtol=0, atol=1e-10)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-1e3, 1e3, allow_nan=False), min_size=3, max_size=300), st.integers(1, 200))
def test_acf_equals_statsmodels_property(values: list[float], nlags: int) -> None:
    """statsmodels.tsa.stattools.acf on arbitrary non-constant series: equal to 1e-10."""
    x = np.array(values)
    assume(np.ptp(x) >= 1e-3)
    m = min(nlags, x.size - 1)
    np.testing.assert_allclose(acf(x, m), sm_acf(x, nlags=m), rtol=0, atol=1e-10)


def test_autocorrelation_with_missing_buckets_uses_present_pairs() -> None:
    """Documented NaN rule, checked by hand: mean and denominator over present values, numerator
    over pairs with both buckets present."""
    x = np.array([1.0, 3.0, np.nan, 2.0, 6.0, 4.0])
    v = np.array([1.0, 3.0, 2.0, 6.0, 4.0])
    d = v - v.mean()                                         # deviations of 1, 3, 2, 6, 4
    den = float(np.dot(d, d))
    lag1 = (d[0] * d[1] + d[2] * d[3] + d[3] * d[4]) / den    # pairs (0,1), (3,4), (4,5)
    lag2 = (d[1] * d[2] + d[2] * d[4]) / den                  # pairs (1,3), (3,5)
    assert autocorrelation(x, 1) == pytest.approx(lag1, abs=1e-15)
    assert autocorrelation(x, 2) == pytest.approx(lag2, abs=1e-15)
    np.testing.assert_allclose(acf(x, 2), [1.0, lag1, lag2], atol=1e-15)


# --------------------------------------------------------------------------- periods: references


def test_sunspots_schwabe_cycle() -> None:
    """Yearly sunspot numbers 1700-2008 (timeseries/sunspots.csv): dominant period 11 +/- 1 years,
    the Schwabe cycle (Hathaway 2015, Living Rev. Sol. Phys. 12:4). Reached: 11.16 years, labelled
    "11 years", ACF 0.64 at lag 11."""
    x = _csv_column("sunspots.csv", 1)
    found = find_periods(x, YEAR, min_period=2 * YEAR, max_period=100 * YEAR)
    top = found[0]
    assert abs(top.seconds / YEAR - 11.0) <= 1.0
    assert top.label == "11 years"
    assert top.p < 1e-10 and top.acf > 0.5


def test_co2_annual_cycle() -> None:
    """Weekly Mauna Loa CO2 1958-2001 (timeseries/co2.csv, 59 of 2284 weeks missing): after the
    trend is removed, an annual cycle of 52 +/- 1 weeks (Keeling et al. 1976, Tellus 28:538).
    Reached: 52.17 weeks, strength 0.69, with harmonics at 26 and 17 weeks."""
    x = _csv_column("co2.csv", 1)
    assert np.isnan(x).sum() == 59
    top = find_periods(x, WEEK, min_period=2 * WEEK, max_period=300 * WEEK)[0]
    assert abs(top.seconds / WEEK - 52.0) <= 1.0
    assert top.label == "1 year"
    assert any(abs(h / WEEK - 26.0) <= 1.0 for h in top.harmonics)


def test_co2_annual_cycle_with_a_third_missing_uses_lomb_scargle() -> None:
    """Same published annual cycle (Keeling et al. 1976) with a further 30% of weeks deleted
    (seeded), so the Lomb-Scargle path is used. Reached: 52.16-52.19 weeks on each seed."""
    x = _csv_column("co2.csv", 1)
    for seed in range(3):
        rng = np.random.default_rng(seed)
        gapped = np.where(rng.random(x.size) < 0.3, np.nan, x)
        assert np.isnan(gapped).mean() > 0.2
        top = find_periods(gapped, WEEK, min_period=2 * WEEK, max_period=300 * WEEK)[0]
        assert abs(top.seconds / WEEK - 52.0) <= 1.0


def test_lew_dominant_frequency() -> None:
    """NIST StRD Lew (beam deflection, 200 observations): dominant frequency 0.30 +/- 0.005 cycles
    per observation (NIST/SEMATECH e-Handbook of Statistical Methods, section 1.4.2.5).
    Reached: 0.3013 (the shared notes give 0.3018 from a zero-padded periodogram)."""
    x = _nist("Lew.dat")
    top = find_periods(x, 1.0, min_period=2.0, max_period=50.0)[0]
    assert abs(1.0 / top.seconds - 0.30) <= 0.005
    assert top.strength > 0.9


def test_gapped_power_is_scipy_weighted_lomb_scargle() -> None:
    """scipy.signal.lombscargle with the same (Hann) weights, floating_mean=False: our FFT evaluation
    on the Fourier grid is proportional to it (same statistic, another normalisation)."""
    rng = np.random.default_rng(3)
    n = 240
    t = np.arange(n)
    x = np.sin(2 * np.pi * t / 17.3) + rng.normal(size=n)
    present = rng.random(n) > 0.35
    ours = _gapped_lomb_scargle(np.where(present, x, np.nan), present)
    w = signal.get_window("hann", n)[present]
    y = x[present] - np.dot(w, x[present]) / w.sum()
    k = np.arange(1, n // 2)
    ref = signal.lombscargle(t[present].astype(float), y, 2 * np.pi * k / n, weights=w, floating_mean=False)
    ratio = ours[k] / ref
    assert np.ptp(ratio) <= 1e-9 * ratio.mean()


# --------------------------------------------------------------------------- periods: planted


def test_planted_pulse_and_daily_rhythm() -> None:
    """Planted (synthetic, seeded): 2 minutes high every 11 minutes, an afternoon bump each day,
    AR(1) noise (phi 0.7) and a level shift, 14 days of 60-s buckets. The 11-min period within 2%
    (reached: 660.01 s) with its harmonics; 1 day within 2% (reached: 86189 s); nothing else."""
    x = _planted(1)
    found = find_periods(x, MINUTE, min_period=2 * MINUTE, max_period=x.size * MINUTE)
    assert {p.label for p in found} == {"11 min", "1 day"}
    pulse = _only(found, 660.0, 0.02)
    assert pulse.p < 1e-10 and pulse.acf > 0.5
    assert pulse.harmonics[0] == pytest.approx(330.0, rel=0.02)
    assert len(pulse.harmonics) >= 3
    day = _only(found, 86400.0, 0.02)
    assert day.harmonics and day.harmonics[0] == pytest.approx(43200.0, rel=0.02)
    assert 0 < pulse.strength < day.strength < 1


def test_planted_level_shift() -> None:
    """Planted (synthetic, seeded): the same series, shift of +4 at bucket 13277 (day 9, 05:17).
    Raw series: a change point within one day (1440 buckets) of it (reached: 0-120 buckets; the
    daily bump also produces changes). With each minute-of-day's median removed first: exactly one
    change, at the planted bucket (reached: exact on all seeds), of 4 +/- 10%."""
    shift_at = 9 * DAY_BUCKETS + 317
    for seed in range(3):
        x = _planted(seed)
        raw = change_points(x)
        assert min(abs(c.index - shift_at) for c in raw) <= DAY_BUCKETS
        profile = np.median(x.reshape(-1, DAY_BUCKETS), axis=0)
        (cp,) = change_points(x - np.tile(profile, x.size // DAY_BUCKETS))
        assert abs(cp.index - shift_at) <= 1
        assert cp.after_mean - cp.before_mean == pytest.approx(4.0, rel=0.1)


def test_two_rhythms_and_leakage() -> None:
    """Planted (synthetic, seeded): a daily and a weekly sine over 8 weeks of 15-min buckets plus
    white noise, neither on a Fourier bin: both found, labelled "1 day" and "7 days", and the
    strong daily line's leakage does not add neighbours."""
    rng = np.random.default_rng(4)
    dt = 900.0
    n = 8 * 7 * 96 + 37
    t = np.arange(n) * dt
    x = 5 * np.sin(2 * np.pi * t / 86400.0) + 2 * np.sin(2 * np.pi * t / (7 * 86400.0)) + rng.normal(size=n)
    found = find_periods(x, dt, min_period=2 * dt, max_period=20 * 86400.0)
    assert [p.label for p in found] == ["1 day", "7 days"]
    assert found[0].seconds == pytest.approx(86400.0, rel=0.01)
    assert found[1].seconds == pytest.approx(7 * 86400.0, rel=0.02)


def test_office_hours_with_quiet_weekends() -> None:
    """Planted (synthetic, seeded): 08:00-18:00 busy on weekdays, a tenth of that at weekends, AR(1)
    noise, 4 weeks of 10-min buckets. The many harmonics and weekday/weekend side bands cover a
    large share of the bins, so the background must be refitted without them: "1 day" and the
    weekly period (within 3%; reached 6.9-7.0 days) are found, and the side bands at 28 h and
    21 h are reported as harmonics of the week (k = 6, 8), not as periods of their own."""
    dt = 600.0
    per_day = 144
    t = np.arange(28 * per_day)
    office = (((t % per_day) >= 48) & ((t % per_day) < 108)).astype(float)
    weekday = (t // per_day) % 7 < 5
    for seed in range(3):
        rng = np.random.default_rng(seed)
        x = 100 + 400 * office * np.where(weekday, 1.0, 0.1) + 30 * _ar1(rng, 0.6, t.size)
        found = find_periods(x, dt, min_period=2 * dt, max_period=8 * 86400.0)
        assert len(found) == 2
        day = _only(found, 86400.0, 0.01)
        week = _only(found, 7 * 86400.0, 0.03)
        assert day.harmonics[:2] == pytest.approx((43200.0, 28800.0), rel=0.01)
        assert any(h == pytest.approx(7 * 86400.0 / 6, rel=0.02) for h in week.harmonics)
        assert any(h == pytest.approx(7 * 86400.0 / 8, rel=0.02) for h in week.harmonics)


def test_weak_cycle_under_a_dominant_office_day() -> None:
    """Planted (synthetic, seeded): a square office-hours day (amplitude 10) with a weak 137-min
    sine (amplitude 0.3-5) and white noise, 30 days of minutes. On the raw series the day makes
    every lag of a few hours alike, so the 137-min cycle can only be confirmed once the day's
    average shape is taken out; its far harmonics (beyond the 32 grouped) must not turn into
    periods of their own once the day is gone. Found: exactly "1 day" and 137 min (within 1%)."""
    n = 30 * DAY_BUCKETS
    t = np.arange(n)
    office = 10.0 * (((t % DAY_BUCKETS) >= 480) & ((t % DAY_BUCKETS) < 1080))
    for seed, amp in enumerate((0.3, 0.5, 1.0, 2.0, 5.0)):
        rng = np.random.default_rng(seed)
        x = office + amp * np.sin(2 * np.pi * t / 137) + rng.normal(size=n)
        found = find_periods(x, MINUTE, min_period=2 * MINUTE, max_period=7 * 86400.0)
        assert len(found) == 2, [p.label for p in found]
        _only(found, 86400.0, 0.01)
        assert _only(found, 137 * MINUTE, 0.01).acf > 0.03


def test_strong_rhythm_over_white_noise_gives_no_false_periods() -> None:
    """Planted (synthetic, seeded): a strong daily sine over white noise of several levels; the
    series' own r1 is 0.85-0.998 here, i.e. it describes the rhythm, not the noise. With the
    background fitted to the periodogram, only "1 day" is reported on each of 10 seeds."""
    n = 14 * DAY_BUCKETS
    t = np.arange(n)
    for seed in range(10):
        rng = np.random.default_rng(seed)
        x = 10 * np.sin(2 * np.pi * t / DAY_BUCKETS) + rng.normal(size=n) * (0.3 + 0.3 * seed)
        found = find_periods(x, MINUTE, min_period=2 * MINUTE, max_period=n * MINUTE)
        assert [p.label for p in found] == ["1 day"]


def test_false_alarms_white_noise() -> None:
    """False alarms on white noise: 200 seeded series, n 2000-5000, every period from 2 buckets
    to a third of the series searched at alpha 0.01: reported in at most 3% of series.
    Reached: 0 of these 200 (0.4%, 4 of 1000 other seeded series, in development)."""
    rng = np.random.default_rng(2024)
    hits = 0
    for _ in range(200):
        n = int(rng.integers(2000, 5001))
        hits += bool(find_periods(rng.normal(size=n), MINUTE, min_period=2 * MINUTE, max_period=n * MINUTE))
    assert hits <= 6


def test_false_alarms_red_noise() -> None:
    """False alarms on AR(1) noise: 200 seeded series, phi uniform in 0.5-0.9, n 2000-5000, alpha
    0.01: reported in at most 3% of series. Reached: 0 of these 200 (0.2%, 2 of 1000 other seeded
    series, in development)."""
    rng = np.random.default_rng(2025)
    hits = 0
    for _ in range(200):
        n = int(rng.integers(2000, 5001))
        x = _ar1(rng, float(rng.uniform(0.5, 0.9)), n)
        hits += bool(find_periods(x, MINUTE, min_period=2 * MINUTE, max_period=n * MINUTE))
    assert hits <= 6


def test_three_months_of_minutes_is_fast() -> None:
    """Speed: 129,600 one-minute buckets (90 days) with a daily, a weekly and an 11-min pattern.
    find_periods (ACF confirmation included) well under a second: measured 0.07-0.13 s on a
    shared 2-core machine (0.14 s with 25% of buckets missing); required < 1 s (best of 3)."""
    rng = np.random.default_rng(5)
    n = 90 * DAY_BUCKETS
    t = np.arange(n)
    weekday = np.where((t // DAY_BUCKETS) % 7 < 5, 1.0, 0.3)
    x = (20 + 3.0 * ((t % 11) < 2) + 6.0 * np.exp(-0.5 * (((t % DAY_BUCKETS) / 60 - 14) / 3) ** 2) * weekday
         + _ar1(rng, 0.7, n))
    best = math.inf
    for _ in range(3):
        start = time.perf_counter()
        found = find_periods(x, MINUTE, min_period=2 * MINUTE, max_period=30 * 86400.0)
        best = min(best, time.perf_counter() - start)
    assert best < 1.0
    assert {"1 day", "11 min", "7 days"} <= {p.label for p in found}


@pytest.mark.parametrize(("seconds", "label"), [
    (45.0, "45 s"), (3.3, "3.3 s"), (660.0, "11 min"), (330.0, "5.5 min"), (6 * 3600.0, "6 h"),
    (86400.0, "1 day"), (86188.7, "1 day"), (7 * 86400.0, "7 days"), (11 * YEAR, "11 years"),
    (52.17 * WEEK, "1 year"),
])
def test_period_label(seconds: float, label: str) -> None:
    """Labels in human terms, by seconds (a year is 365.25 days)."""
    assert period_label(seconds) == label


# --------------------------------------------------------------------------- episodes


def test_episodes_hand_example() -> None:
    """Hand example: exact starts and ends, merging across gaps shorter than gap_buckets, NaN never
    above (and it does not break a gap either way)."""
    x = np.array([0, 5, 6, 0, 7, 0, 0, 0, 9, np.nan, 8, 0], dtype=float)
    t = 1_000_000 + 60_000_000 * np.arange(x.size)
    got = episodes(x, t, 4.0, gap_buckets=2, bucket_us=60_000_000)
    assert got == [
        {"start_us": t[1], "end_us": t[4] + 60_000_000, "buckets": 4, "above": 3, "peak": 7.0},
        {"start_us": t[8], "end_us": t[10] + 60_000_000, "buckets": 3, "above": 2, "peak": 9.0},
    ]
    merged = episodes(x, t, 4.0, gap_buckets=4, bucket_us=60_000_000)
    assert [(e["start_us"], e["end_us"], e["above"]) for e in merged] == [(t[1], t[11], 5)]
    separate = episodes(x, t, 4.0, gap_buckets=0, bucket_us=60_000_000)
    assert [e["buckets"] for e in separate] == [2, 1, 1, 1]


def test_episodes_edges_and_nothing_above() -> None:
    """Hand example: runs touching both ends; equal to the threshold is not above; all-NaN gives none."""
    x = np.array([9.0, 9.0, 1.0, 4.0, 9.0])
    t = np.arange(x.size) * 10
    got = episodes(x, t, 4.0, gap_buckets=1, bucket_us=10)
    spans = [(e["start_us"], e["end_us"], e["buckets"], e["peak"]) for e in got]
    assert spans == [(0, 20, 2, 9.0), (40, 50, 1, 9.0)]
    assert episodes(np.full(4, np.nan), np.arange(4), 0.0, gap_buckets=3, bucket_us=1) == []
    with pytest.raises(ValueError, match="times_us"):
        episodes(x, t[:-1], 4.0, gap_buckets=1, bucket_us=10)


# --------------------------------------------------------------------------- change points


def test_nile_level_shift() -> None:
    """Nile flow at Aswan 1871-1970 (timeseries/nile.csv): one level shift, at 1898 +/- 1 year
    (Cobb 1978, Biometrika 65:243-251), with means near 1098 before and 850 after.
    Reached: one change, last old year 1898 (new level from 1899), means 1097.75 and 849.97:
    required within 0.1% of 1098 and 850."""
    years = _csv_column("nile.csv", 0)
    x = _csv_column("nile.csv", 1)
    (cp,) = change_points(x)
    assert abs(years[cp.index - 1] - 1898) <= 1
    assert cp.before_mean == pytest.approx(1098.0, rel=1e-3)
    assert cp.after_mean == pytest.approx(850.0, rel=1e-3)


def test_penalty_is_scaled_for_ar1_noise() -> None:
    """Planted (synthetic, seeded): AR(1) noise, phi 0.7, n 1000, no shift. With the default
    penalty (long-run variance, see default_penalty) at most 5% of 100 series get a change
    (reached: 0%); the white-noise penalty 2 sigma_d^2 log n would give one in nearly every series
    (reached: 100%), which is why the default scales it."""
    rng = np.random.default_rng(77)
    scaled = unscaled = 0
    for _ in range(100):
        x = _ar1(rng, 0.7, 1000)
        sigma, phi = noise_scale(x)
        assert 0.55 < phi < 0.85
        scaled += bool(change_points(x))
        unscaled += bool(change_points(x, penalty=2 * sigma**2 * math.log(x.size)))
    assert scaled <= 5
    assert unscaled >= 80


def test_white_noise_false_changes_and_shift_in_red_noise() -> None:
    """Planted (synthetic, seeded): white noise n 1000 gets a change in at most 3% of 100 series
    (reached: 1 of 100); a shift of 2 noise standard deviations in AR(1) noise
    (phi 0.7) at 600 of 1000 is found within 20 buckets in at least 90% of 100 series (reached 99%)."""
    rng = np.random.default_rng(78)
    false = sum(bool(change_points(rng.normal(size=1000))) for _ in range(100))
    assert false <= 3
    hits = 0
    for _ in range(100):
        x = _ar1(rng, 0.7, 1000) * math.sqrt(1 - 0.7**2)
        x[600:] += 2.0
        hits += any(abs(c.index - 600) <= 20 for c in change_points(x))
    assert hits >= 90


def test_change_points_hand_example() -> None:
    """Hand example: a noise-free staircase (MAD of differences is 0, so the fallback scale is
    used, and flat blocks give phi 0): every step found with its exact means; max_points keeps
    the largest drop in the sum of squares; min_size 45 moves the last cut to 220 - 45."""
    x = np.repeat([1.0, 5.0, 2.0, 2.5], [60, 50, 70, 40])
    sigma, phi = noise_scale(x)
    assert sigma == pytest.approx(math.sqrt((16 + 9 + 0.25) / (2 * 219)))
    assert phi == pytest.approx(1 / (27 - 3))          # block r1 0, bias-corrected: (0 * L + 1) / (L - 3)
    got = change_points(x)
    assert [c.index for c in got] == [60, 110, 180]
    means = [(c.before_mean, c.after_mean) for c in got]
    np.testing.assert_allclose(means, [(1, 5), (5, 2), (2, 2.5)], atol=1e-12)
    assert [c.index for c in change_points(x, max_points=1)] == [60]
    shorter = change_points(x, min_size=45)
    assert [c.index for c in shorter] == [60, 110, 175]
    assert shorter[2].after_mean == pytest.approx((5 * 2 + 40 * 2.5) / 45)
    assert default_penalty(x) == pytest.approx(2 * sigma**2 * math.log(220) * (1 + phi) / (1 - phi) ** 2)


# --------------------------------------------------------------------------- errors


@pytest.mark.parametrize(("call", "message"), [
    (lambda: autocorrelation(np.full(10, 3.0), 1), "constant"),
    (lambda: acf(np.array([1.0]), 0), "too short"),
    (lambda: autocorrelation(np.arange(5.0), 5), "not shorter"),
    (lambda: find_periods(np.full(100, 2.0), 60.0, min_period=120.0, max_period=3000.0), "constant"),
    (lambda: find_periods(np.arange(100.0), 60.0, min_period=120.0, max_period=3000.0), "straight line"),
    (lambda: find_periods(np.arange(10.0) % 3, 60.0, min_period=120.0, max_period=3000.0), "too short"),
    (lambda: find_periods(np.r_[np.arange(20.0) % 3, np.full(80, np.nan)], 60.0, min_period=120.0,
                          max_period=3000.0), None),
    (lambda: find_periods(np.arange(100.0) % 7, 60.0, min_period=7200.0, max_period=86400.0), "too short"),
    (lambda: find_periods(np.arange(100.0) % 7, 60.0, min_period=600.0, max_period=300.0), "min_period"),
    (lambda: change_points(np.full(50, 1.0)), "constant"),
    (lambda: change_points(np.array([1.0, 2.0, 3.0])), "too short"),
    (lambda: change_points(np.array([1.0, np.nan, 3.0, 4.0, 5.0])), "missing"),
])
def test_unusable_input_gives_one_line_value_error(call: Callable[[], object], message: str | None) -> None:
    """Constant, too short, straight-line and malformed input: ValueError with a one-line message."""
    if message is None:             # 20 present values of 100: enough to try, and it works
        assert isinstance(call(), list)
        return
    with pytest.raises(ValueError, match=message) as err:
        call()
    assert "\n" not in str(err.value)
