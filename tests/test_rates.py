"""Cumulative counters -> per-second rates."""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from warehouse.ingest.rates import (
    AUTO_CUMULATIVE_PATTERNS,
    RateState,
    is_cumulative,
    rates_for_batch,
    to_rates,
)

S = 1_000_000                    # microseconds per second
T0 = 1_700_000_000 * S           # an arbitrary instant
TWO32 = 2**32
TWO64 = 2**64


def _ts(*seconds: float) -> np.ndarray:
    return np.array([T0 + round(s * S) for s in seconds], dtype=np.int64)


def _vals(*values: float) -> np.ndarray:
    return np.array(values, dtype=np.float64)


# --------------------------------------------------------------------------- a plain oracle


def _reference(
    ts: list[int], vals: list[float], state: RateState | None
) -> tuple[list[int], list[float], RateState | None, int, int]:
    """The documented rules, one sample at a time, in plain Python."""
    order = sorted(range(len(ts)), key=lambda i: ts[i])  # stable
    out_t: list[int] = []
    out_r: list[float] = []
    wraps = resets = 0
    base = state
    for i in order:
        t, v = ts[i], vals[i]
        if not math.isfinite(v):
            continue
        if base is not None and t <= base.last_ts:
            continue
        if base is not None:
            d = v - base.last_value
            emit = True
            if d < 0:
                prev = base.last_value
                if v >= 0 and prev <= TWO32 - 1 and (TWO32 - prev) + v < 2**31:
                    d, wraps = (TWO32 - prev) + v, wraps + 1
                elif v >= 0 and prev <= float(TWO64) and (float(TWO64) - prev) + v < 2**63:
                    d, wraps = (float(TWO64) - prev) + v, wraps + 1
                else:
                    emit, resets = False, resets + 1
            if emit:
                out_t.append(t)
                out_r.append(d / ((t - base.last_ts) / 1e6))
        base = RateState(t, v)
    return out_t, out_r, base, wraps, resets


# --------------------------------------------------------------------------- single counter


def test_steady_counter_gives_exact_rate() -> None:
    ts = _ts(0, 10, 20, 30)
    rt, r, state, wraps, resets = to_rates(ts, _vals(1000, 2000, 3000, 4000), None)
    assert rt.tolist() == ts[1:].tolist()
    assert r.tolist() == [100.0, 100.0, 100.0]
    assert (wraps, resets) == (0, 0)
    assert state == RateState(int(ts[-1]), 4000.0)
    assert r.dtype == np.float64 and rt.dtype == np.int64


def test_first_sample_only_sets_the_baseline() -> None:
    rt, r, state, _, _ = to_rates(_ts(0), _vals(5), None)
    assert rt.size == 0 and r.size == 0
    assert state == RateState(T0, 5.0)
    rt, r, state, _, _ = to_rates(_ts(4), _vals(25), state)
    assert rt.tolist() == [T0 + 4 * S] and r.tolist() == [5.0]


def test_no_samples_keeps_state() -> None:
    assert to_rates(_ts(), _vals(), None)[2] is None
    old = RateState(T0, 7.0)
    assert to_rates(_ts(), _vals(), old)[2] is old


def test_32_bit_wrap_is_corrected() -> None:
    rt, r, _, wraps, resets = to_rates(_ts(0, 10), _vals(4294967000, 300), None)
    assert r.tolist() == [(300 + 2**32 - 4294967000) / 10]
    assert rt.tolist() == [T0 + 10 * S]
    assert (wraps, resets) == (1, 0)


def test_32_bit_wrap_from_the_very_top() -> None:
    _, r, _, wraps, _ = to_rates(_ts(0, 1), _vals(2**32 - 1, 0), None)
    assert r.tolist() == [1.0] and wraps == 1


def test_64_bit_wrap_is_corrected() -> None:
    before = float(2**64 - 2**13)      # exactly representable
    _, r, _, wraps, resets = to_rates(_ts(0, 10), _vals(before, 1000), None)
    assert r.tolist() == [(2**13 + 1000) / 10]
    assert (wraps, resets) == (1, 0)


def test_reset_gives_a_gap_then_rates_from_the_new_baseline() -> None:
    ts = _ts(0, 10, 20, 30)
    rt, r, state, wraps, resets = to_rates(ts, _vals(4.9e9, 5e9, 100, 160), None)
    assert rt.tolist() == [ts[1], ts[3]]          # nothing at ts[2]
    assert r.tolist() == [1e7, 6.0]
    assert (wraps, resets) == (0, 1)
    assert state == RateState(int(ts[3]), 160.0)


def test_small_drop_of_a_small_counter_is_a_reset_not_a_wrap() -> None:
    _, r, _, wraps, resets = to_rates(_ts(0, 10, 20), _vals(1000, 10, 30), None)
    assert r.tolist() == [2.0]
    assert (wraps, resets) == (0, 1)


def test_drop_to_a_negative_value_is_a_reset() -> None:
    _, r, _, wraps, resets = to_rates(_ts(0, 10), _vals(4294967000, -5), None)
    assert r.size == 0 and (wraps, resets) == (0, 1)


def test_reset_against_carried_state() -> None:
    state = RateState(T0, 8e9)
    rt, r, new, wraps, resets = to_rates(_ts(10, 20), _vals(50, 150), state)
    assert rt.tolist() == [T0 + 20 * S] and r.tolist() == [10.0]
    assert (wraps, resets) == (0, 1)
    assert new == RateState(T0 + 20 * S, 150.0)


def test_irregular_intervals() -> None:
    ts = _ts(0, 1, 3.5, 10, 10.25)
    v = _vals(0, 10, 35, 100, 101)
    rt, r, _, _, _ = to_rates(ts, v, None)
    assert rt.tolist() == ts[1:].tolist()
    assert r.tolist() == [10.0 / 1.0, 25.0 / 2.5, 65.0 / 6.5, 1.0 / 0.25]


def test_duplicated_timestamps_give_no_rate_and_keep_the_first() -> None:
    ts = _ts(0, 10, 10, 20)
    rt, r, _, wraps, resets = to_rates(ts, _vals(0, 100, 999, 300), None)
    assert rt.tolist() == [ts[1], ts[3]]
    assert r.tolist() == [10.0, 20.0]
    assert (wraps, resets) == (0, 0)


def test_samples_not_later_than_the_state_are_skipped() -> None:
    state = RateState(T0 + 10 * S, 100.0)
    rt, r, new, _, resets = to_rates(_ts(5, 10, 20), _vals(50, 70, 200), state)
    assert rt.tolist() == [T0 + 20 * S] and r.tolist() == [10.0]
    assert resets == 0
    assert new == RateState(T0 + 20 * S, 200.0)


def test_nan_is_skipped_without_breaking_the_baseline() -> None:
    ts = _ts(0, 10, 20, 30)
    rt, r, state, _, _ = to_rates(ts, _vals(0, math.nan, 200, math.nan), None)
    assert rt.tolist() == [ts[2]]
    assert r.tolist() == [10.0]
    assert state == RateState(int(ts[2]), 200.0)
    old = RateState(T0, 1.0)
    assert to_rates(_ts(5), _vals(math.nan), old)[2] is old


def test_unsorted_input_is_rated_in_time_order() -> None:
    ts = _ts(20, 0, 10)
    rt, r, _, _, _ = to_rates(ts, _vals(300, 0, 100), None)
    assert rt.tolist() == [T0 + 10 * S, T0 + 20 * S]
    assert r.tolist() == [10.0, 20.0]


def test_never_a_negative_rate() -> None:
    rng = np.random.default_rng(7)
    v = rng.uniform(0, 2**33, 500)
    _, r, _, wraps, resets = to_rates(T0 + np.arange(500, dtype=np.int64) * S, v, None)
    assert (r >= 0).all()
    assert wraps + resets == int((np.diff(v) < 0).sum())


# --------------------------------------------------------------------------- batches


def test_gauges_pass_through_untouched() -> None:
    idx = np.array([2, 0, 1, 0, 2, 1, 0], dtype=np.int32)
    ts = _ts(0, 0, 0, 10, 10, 10, 20)
    vals = _vals(55.5, 100, math.nan, 300, -3, 7, 600)
    cumulative = np.array([True, False, False])
    states: dict[int, RateState] = {}
    oi, ot, ov, wraps, resets = rates_for_batch(idx, ts, vals, cumulative, states)
    gauges = idx != 0
    n_g = int(gauges.sum())
    assert oi[:n_g].tolist() == idx[gauges].tolist()
    assert ot[:n_g].tolist() == ts[gauges].tolist()
    np.testing.assert_array_equal(ov[:n_g], vals[gauges])   # NaN included, order kept
    assert oi[n_g:].tolist() == [0, 0]
    assert ot[n_g:].tolist() == [T0 + 10 * S, T0 + 20 * S]
    assert ov[n_g:].tolist() == [20.0, 30.0]
    assert set(states) == {0}
    assert oi.dtype == np.int32 and ot.dtype == np.int64 and ov.dtype == np.float64


def test_batch_without_cumulative_counters_is_returned_as_is() -> None:
    idx = np.array([1, 0], dtype=np.int32)
    ts, vals = _ts(0, 1), _vals(3, 4)
    oi, ot, ov, wraps, resets = rates_for_batch(idx, ts, vals, np.zeros(2, dtype=bool), {})
    assert oi is idx and ot is ts and ov is vals and (wraps, resets) == (0, 0)


def test_batch_matches_per_counter_and_is_sorted() -> None:
    rng = np.random.default_rng(11)
    n_counters, n_rows = 6, 40
    idx = np.tile(np.arange(n_counters, dtype=np.int32), n_rows)
    ts = np.repeat(T0 + np.arange(n_rows, dtype=np.int64) * 15 * S, n_counters)
    vals = np.cumsum(rng.integers(0, 1000, idx.size)).astype(np.float64)
    vals[rng.random(idx.size) < 0.05] = 0.0               # some resets
    perm = rng.permutation(idx.size)
    idx, ts, vals = idx[perm], ts[perm], vals[perm]
    cumulative = np.array([True, True, False, True, True, True])
    states: dict[int, RateState] = {}
    oi, ot, ov, wraps, resets = rates_for_batch(idx, ts, vals, cumulative, states)
    n_g = int((idx == 2).sum())
    ri, rt, rv = oi[n_g:], ot[n_g:], ov[n_g:]
    assert np.all((ri[1:] > ri[:-1]) | ((ri[1:] == ri[:-1]) & (rt[1:] > rt[:-1])))
    total_w = total_r = 0
    for c in (0, 1, 3, 4, 5):
        m = idx == c
        ct, cr, cstate, w, r = to_rates(ts[m], vals[m], None)
        assert rt[ri == c].tolist() == ct.tolist()
        assert rv[ri == c].tolist() == cr.tolist()
        assert states[c] == cstate
        total_w, total_r = total_w + w, total_r + r
    assert (wraps, resets) == (total_w, total_r) and resets > 0


@pytest.mark.parametrize("base", [0, 65_510])     # indices below and across 2**16
def test_time_ordered_interleaved_batch(base: int) -> None:
    # File order: one row per instant, every counter in it; a repeated instant per counter.
    rng = np.random.default_rng(base + 3)
    n_counters, n_rows = 50, 30
    row_ts = T0 + np.repeat(np.arange(n_rows // 2, dtype=np.int64), 2) * 10 * S
    ts = np.repeat(row_ts, n_counters)
    idx = np.tile(rng.permutation(n_counters).astype(np.int32) + base, n_rows)
    vals = np.cumsum(rng.uniform(0, 1e3, (n_rows, n_counters)), axis=0).ravel()
    cumulative = np.ones(base + n_counters, dtype=bool)
    states: dict[int, RateState] = {}
    oi, ot, ov, _, _ = rates_for_batch(idx, ts, vals, cumulative, states)
    assert oi.size == n_counters * (n_rows // 2 - 1)
    for c in range(base, base + n_counters):
        m = idx == c
        t, r, s, _, _ = to_rates(ts[m], vals[m], None)
        ref_t, ref_r, ref_s, _, _ = _reference(ts[m].tolist(), vals[m].tolist(), None)
        assert t.tolist() == ref_t and r.tolist() == ref_r and s == ref_s
        assert ot[oi == c].tolist() == ref_t
        assert ov[oi == c].tolist() == ref_r
        assert states[c] == ref_s


def test_counter_whose_samples_are_all_stale_does_not_shift_the_others() -> None:
    states = {0: RateState(T0 + 100 * S, 5.0), 1: RateState(T0, 10.0), 2: RateState(T0, 0.0)}
    idx = np.array([0, 0, 1, 2], dtype=np.int32)
    oi, ot, ov, _, resets = rates_for_batch(
        idx, _ts(50, 60, 10, 20), _vals(1, 2, 20, 40), np.ones(3, dtype=bool), states
    )
    assert oi.tolist() == [1, 2]
    assert ot.tolist() == [T0 + 10 * S, T0 + 20 * S]
    assert ov.tolist() == [1.0, 2.0]
    assert resets == 0
    assert states[0] == RateState(T0 + 100 * S, 5.0)


def test_states_are_updated_in_place_without_mutating_old_objects() -> None:
    old = RateState(T0, 0.0)
    states = {0: old, 9: RateState(T0, 1.0)}
    idx = np.array([0], dtype=np.int32)
    rates_for_batch(idx, _ts(10), _vals(50), np.ones(10, dtype=bool), states)
    assert states[0] == RateState(T0 + 10 * S, 50.0)
    assert old == RateState(T0, 0.0)
    assert states[9] == RateState(T0, 1.0)


def test_wide_timestamp_span_uses_the_fallback_sort() -> None:
    # A counter index and a time span too wide to share one 63-bit sort key.
    idx = np.array([2**30, 0, 2**30, 0], dtype=np.int32)
    ts = np.array([2**40, 2**40, 0, 0], dtype=np.int64)
    vals = _vals(20, 8, 10, 4)
    cumulative = np.zeros(2**30 + 1, dtype=bool)
    cumulative[[0, 2**30]] = True
    oi, ot, ov, _, _ = rates_for_batch(idx, ts, vals, cumulative, {})
    assert oi.tolist() == [0, 2**30] and ot.tolist() == [2**40, 2**40]
    assert ov.tolist() == [4 / (2**40 / 1e6), 10 / (2**40 / 1e6)]


# --------------------------------------------------------------------------- properties

_value = st.one_of(
    st.floats(0, 2**32 - 1, allow_nan=False),
    st.integers(0, 2**32 - 1).map(float),
    st.floats(2**63, 2**64 - 2**12, allow_nan=False),
    st.just(math.nan),
)


@st.composite
def _series(draw: st.DrawFn) -> tuple[list[int], list[float]]:
    n = draw(st.integers(0, 40))
    steps = draw(st.lists(st.sampled_from([0, 1, 250_000, 10 * S, 15 * S, 61 * S]),
                          min_size=n, max_size=n))
    ts = list(np.cumsum([T0] + steps)[1:]) if n else []
    vals = draw(st.lists(_value, min_size=n, max_size=n))
    return [int(t) for t in ts], vals


@settings(max_examples=60, deadline=None)
@given(_series(), st.data())
def test_streaming_in_batches_equals_one_batch(
    series: tuple[list[int], list[float]], data: st.DataObject
) -> None:
    ts, vals = series
    t_all, r_all, s_all, w_all, x_all = to_rates(np.array(ts, np.int64), np.array(vals), None)
    cuts = sorted(data.draw(st.lists(st.integers(0, len(ts)), max_size=6)))
    bounds = [0, *cuts, len(ts)]
    state: RateState | None = None
    t_parts: list[np.ndarray] = []
    r_parts: list[np.ndarray] = []
    w_sum = x_sum = 0
    for a, b in zip(bounds[:-1], bounds[1:]):
        t, r, state, w, x = to_rates(np.array(ts[a:b], np.int64), np.array(vals[a:b]), state)
        t_parts.append(t)
        r_parts.append(r)
        w_sum, x_sum = w_sum + w, x_sum + x
    assert np.concatenate(t_parts).tolist() == t_all.tolist()
    assert np.concatenate(r_parts).tolist() == r_all.tolist()
    assert (w_sum, x_sum) == (w_all, x_all)
    assert state == s_all


@settings(max_examples=60, deadline=None)
@given(_series(), st.booleans())
def test_matches_the_plain_reference(
    series: tuple[list[int], list[float]], with_state: bool
) -> None:
    ts, vals = series
    state = RateState(T0 + 5 * S, 1e9) if with_state else None
    got_t, got_r, got_s, got_w, got_x = to_rates(np.array(ts, np.int64), np.array(vals), state)
    ref_t, ref_r, ref_s, ref_w, ref_x = _reference(ts, vals, state)
    assert got_t.tolist() == ref_t
    assert got_r.tolist() == ref_r
    assert got_s == ref_s
    assert (got_w, got_x) == (ref_w, ref_x)
    assert (got_r >= 0).all()


@settings(max_examples=30, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 4), _series()), min_size=1, max_size=5),
       st.integers(0, 2**32 - 1))
def test_shuffled_multi_counter_batch_matches_per_counter(
    parts: list[tuple[int, tuple[list[int], list[float]]]], seed: int
) -> None:
    idx_l: list[int] = []
    ts_l: list[int] = []
    val_l: list[float] = []
    for c, (ts, vals) in parts:
        idx_l += [c] * len(ts)
        ts_l += ts
        val_l += vals
    perm = np.random.default_rng(seed).permutation(len(idx_l))
    idx = np.array(idx_l, dtype=np.int32)[perm]
    ts_a = np.array(ts_l, dtype=np.int64)[perm]
    vals_a = np.array(val_l, dtype=np.float64)[perm]
    cumulative = np.array([True, True, False, True, True])
    states: dict[int, RateState] = {}
    oi, ot, ov, wraps, resets = rates_for_batch(idx, ts_a, vals_a, cumulative, states)
    gauge = idx == 2
    n_g = int(gauge.sum())
    np.testing.assert_array_equal(ov[:n_g], vals_a[gauge])
    w_sum = x_sum = 0
    for c in (0, 1, 3, 4):
        m = idx == c
        t, r, s, w, x = _reference(ts_a[m].tolist(), vals_a[m].tolist(), None)
        sel = oi[n_g:] == c
        assert ot[n_g:][sel].tolist() == t
        assert ov[n_g:][sel].tolist() == r
        assert states.get(c) == s
        w_sum, x_sum = w_sum + w, x_sum + x
    assert (wraps, resets) == (w_sum, x_sum)


# --------------------------------------------------------------------------- names


@pytest.mark.parametrize(
    "name",
    [
        "ifInOctets",
        "ifHCOutOctets",
        r"\\core-sw1\Interface(ge-0/0/1)\Octets Received",
        "IFHCINUCASTPKTS",
        "ifInUcastPkts",
        "ifOutErrors",
        "rx_bytes_total",
        "node_disk_read_bytes_total",
        "tx_packets_total_eth0",
        "http_requests_total",
        "Uplink In (Counter64)",
    ],
)
def test_cumulative_names(name: str) -> None:
    assert is_cumulative(name)


@pytest.mark.parametrize(
    "name",
    [
        "Octets/sec",
        "ifInOctets/s",
        "Octets Received per second",
        "rx_octets_per_sec",
        "Bytes Total/sec",
        "rx_bytes_total_rate",
        "% Processor Time",
        "octets utilisation %",
        "Available MBytes",
        "mem_total",
        "swap_total",
        "cpu_user",
        "Current Connections",
        "",
    ],
)
def test_not_cumulative_names(name: str) -> None:
    assert not is_cumulative(name)


def test_user_globs_add_names_but_cannot_override_rate_markers() -> None:
    assert not is_cumulative("Requests Served")
    assert is_cumulative("Requests Served", ("requests served",))
    assert is_cumulative("REQUESTS SERVED", ("*Served",))
    assert is_cumulative("mem_total", ("mem_total",))
    assert not is_cumulative("Requests Served/sec", ("*served*",))
    assert not is_cumulative("request rate", ("*request*",))


def test_auto_patterns_are_lowercase_globs() -> None:
    assert AUTO_CUMULATIVE_PATTERNS
    assert all(p == p.lower() and "*" in p for p in AUTO_CUMULATIVE_PATTERNS)
