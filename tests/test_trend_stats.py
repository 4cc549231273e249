"""Pure statistics of the rollups and trends: mergeable moments (Chan et al.) and Theil-Sen with Sen's interval."""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats as sps

from warehouse.stats import moments
from warehouse.stats.trend import crossing, theil_sen

NIST = Path(__file__).parent / "reference" / "nist-strd"


def _nist_values(name: str) -> np.ndarray:
    """The data lines of a NIST StRD univariate file (after the 60-line header)."""
    lines = (NIST / f"{name}.dat").read_text(encoding="ascii").splitlines()
    return np.array([float(v) for v in lines[60:] if v.strip()])


# -- mergeable moments -------------------------------------------------------------------------------

@pytest.mark.parametrize("cuts", [[7], [1, 2, 500], [100, 200, 300, 400, 500, 600, 700, 800, 900, 1000]])
def test_weeks_merged_by_chan_equal_the_raw_month(cuts: list[int]) -> None:
    """Reference: numpy on the whole array; parts of uneven size merged with Chan et al.'s formulas."""
    rng = np.random.default_rng(4)
    x = rng.gamma(2.0, 50.0, 1001) + 3000.0
    parts = [moments.of(p) for p in np.split(x, cuts)]
    arrays = [np.array([getattr(p, f) for p in parts]) for f in ("n", "mean", "m2", "min", "max")]
    for merged in (moments.combine(*arrays), moments.combine_sequential(parts)):
        assert merged.n == len(x)
        assert merged.mean == pytest.approx(x.mean(), rel=1e-12)
        assert merged.m2 == pytest.approx(((x - x.mean()) ** 2).sum(), rel=1e-10)
        assert merged.sd_pop == pytest.approx(np.std(x), rel=1e-10)
        assert merged.sd_sample == pytest.approx(np.std(x, ddof=1), rel=1e-10)
        assert (merged.min, merged.max) == (x.min(), x.max())


@pytest.mark.parametrize("name", ["NumAcc1", "NumAcc3", "NumAcc4", "Michelso"])
def test_merged_parts_meet_nist_certified_mean_and_sd(name: str) -> None:
    """Source: NIST StRD univariate certified mean and sample sd (tests/reference/SOURCES.md, section 1).

    NumAcc3/4 (mean 1e6 + 0.2 and 1e7 + 0.2, sd 0.1) are the hard cases for moments kept as plain
    sums. Split into seven parts and merged, the sd must reach the log relative error that an exact
    computation on the float64 inputs reaches (recorded in certified.json), less one digit.
    """
    entry = json.loads((NIST / "certified.json").read_text(encoding="ascii"))["univariate"][name]
    certified = entry["certified"]
    best = entry["verification"]["lre_best_possible_from_float64_inputs"]["s"]
    x = _nist_values(name)
    parts = [moments.of(p) for p in np.array_split(x, 7)]
    arrays = [np.array([getattr(p, f) for p in parts]) for f in ("n", "mean", "m2", "min", "max")]
    merged = moments.combine(*arrays)
    assert merged.mean == pytest.approx(certified["mean"], rel=1e-12)
    lre = -math.log10(abs(merged.sd_sample - certified["s"]) / certified["s"]) if merged.sd_sample != certified["s"] else 15
    assert lre >= best - 1.0


@settings(max_examples=60, deadline=None)
@given(st.lists(st.lists(st.floats(-1e6, 1e6), min_size=0, max_size=30), min_size=1, max_size=8))
def test_merge_is_the_moments_of_the_union(chunks: list[list[float]]) -> None:
    """Property: merging the parts equals the moments of the concatenation (empty parts allowed)."""
    whole = [v for c in chunks for v in c]
    merged = moments.combine_sequential([moments.of(np.array(c)) for c in chunks])
    assert merged.n == len(whole)
    if whole:
        x = np.array(whole)
        assert merged.mean == pytest.approx(x.mean(), rel=1e-9, abs=1e-6)
        assert merged.m2 == pytest.approx(((x - x.mean()) ** 2).sum(), rel=1e-9, abs=1e-3)


# -- Theil-Sen -----------------------------------------------------------------------------------------

@pytest.mark.parametrize("confidence", [0.8, 0.9, 0.95])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_theil_sen_equals_scipy_theilslopes(seed: int, confidence: float) -> None:
    """Reference: scipy.stats.theilslopes (same estimator, Sen 1968 interval), on series with gaps
    in x and tied y values (weekly p95s rounded to whole numbers)."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.choice(np.arange(60), size=25, replace=False)).astype(float)
    y = np.round(500 + 12 * x + rng.standard_t(3, len(x)) * 40)
    ours = theil_sen(x, y, confidence)
    ref = sps.theilslopes(y, x, confidence)
    assert ours.slope == pytest.approx(ref.slope, rel=1e-12)
    assert ours.intercept == pytest.approx(ref.intercept, rel=1e-12)
    assert ours.slope_low == pytest.approx(ref.low_slope, rel=1e-12)
    assert ours.slope_high == pytest.approx(ref.high_slope, rel=1e-12)


def test_theil_sen_with_ties_in_x_equals_scipy() -> None:
    """Reference: scipy.stats.theilslopes; repeated x enter Sen's variance through the tie term."""
    x = np.array([0, 1, 1, 2, 3, 3, 3, 4, 5, 6, 7, 8], dtype=float)
    y = np.array([10, 12, 11, 15, 14, 18, 16, 19, 22, 21, 25, 26], dtype=float)
    ours = theil_sen(x, y, 0.9)
    ref = sps.theilslopes(y, x, 0.9)
    assert (ours.slope, ours.slope_low, ours.slope_high) == pytest.approx(
        (ref.slope, ref.low_slope, ref.high_slope), rel=1e-12)


def test_theil_sen_ignores_an_outlier_week() -> None:
    """A single freak week (a backup storm) moves least squares but barely moves the median slope."""
    x = np.arange(12, dtype=float)
    y = 100 + 5 * x
    y[10] = 900
    assert theil_sen(x, y).slope == pytest.approx(5.0)
    assert np.polyfit(x, y, 1)[0] > 10


@pytest.mark.parametrize("seed", range(5))
def test_planted_growth_crosses_capacity_in_the_right_week(seed: int) -> None:
    """A generated weekly series 2000 + 40/week + noise (sd 15) reaches 3600 at week 40: the
    estimate from 26 weeks must be within one week of it (14 weeks past the data)."""
    rng = np.random.default_rng(seed)
    weeks = np.arange(26, dtype=float)
    y = 2000 + 40 * weeks + rng.normal(0, 15, len(weeks))
    line = theil_sen(weeks, y, 0.9)
    c = crossing(line, 3600.0, now=weeks[-1], horizon=52)
    assert c.status == "ahead"
    assert abs(c.x - 40.0) <= 1.0
    assert c.x_early < c.x < c.x_late


def test_crossing_already_reached_and_beyond_the_horizon() -> None:
    x = np.arange(10, dtype=float)
    rising = theil_sen(x, 100 + 10 * x)
    assert crossing(rising, 150, now=9, horizon=52).status == "already"
    far = crossing(rising, 100 + 10 * 200, now=9, horizon=52)
    assert far.status == "not_within" and far.x is None
    flat = theil_sen(x, np.full(10, 100.0) + np.array([0, 1] * 5))
    assert crossing(flat, 500, now=9, horizon=52).status == "not_within"


def test_crossing_interval_uses_the_slope_interval_through_the_pivot() -> None:
    """The early and late weeks are where the lines of slope_high and slope_low, through (median x,
    median y), reach the level: checked by hand from the fitted numbers."""
    rng = np.random.default_rng(9)
    x = np.arange(20, dtype=float)
    line = theil_sen(x, 50 + 3 * x + rng.normal(0, 2, 20), 0.9)
    c = crossing(line, 200, now=19, horizon=100)
    assert c.x_early == pytest.approx(line.pivot_x + (200 - line.pivot_y) / line.slope_high)
    assert c.x_late == pytest.approx(line.pivot_x + (200 - line.pivot_y) / line.slope_low)
    assert c.x_early < c.x < c.x_late
    assert line.at(c.x) == pytest.approx(200)
    assert math.isclose(line.at(0), line.intercept)
