"""Turn cumulative counters (running totals) into per-second rates.

A cumulative counter, such as an interface's received-octets total, only ever grows; what is
worth storing is how fast it grows.  This module converts such series into rates, stamped at
the later sample of each pair, and carries a small per-counter :class:`RateState` between
streaming batches so that splitting a file into batches changes nothing.

Rules, applied per counter in time order:

* ``rate[i] = (v[i] - v[i-1]) / seconds(ts[i] - ts[i-1])``, stamped at ``ts[i]``.  The first
  sample ever seen for a counter only sets the baseline.
* Non-finite values (NaN, +-inf) are skipped: they give no rate and do not move the baseline.
* A sample whose timestamp is not later than the baseline's (a duplicated timestamp, or a late
  sample older than what a previous batch already consumed) is skipped the same way.  Of
  several samples sharing one timestamp the first one (in input order) is the one used.
* A drop in the total is either a *wrap* or a *reset*:

  - 32-bit wrap: the previous value fits in 32 bits, the new one is non-negative, and
    ``v[i] + 2**32 - v[i-1]`` is less than half the 32-bit range; the delta is corrected.
  - 64-bit wrap: likewise with ``2**64``.
  - anything else is a reset (the device restarted): no rate for that sample, never a negative
    one, and the new value becomes the baseline.

  The two cannot always be told apart: a 32-bit counter restarting from above ``2**31`` to a
  small value looks like a wrap and is rated as one.  Values are float64, so a 64-bit counter
  near ``2**64`` is only known to within a few thousand units, and so is a wrap's delta.

Everything is vectorised per batch: one stable sort by ``(counter, time)`` of the cumulative
subset (skipped when the batch already is in that order), then shifted comparisons.  Python
loops run only once per counter present in the batch, to read and write the ``states``
dictionary, plus once per counter that has samples older than its carried state.
"""
from __future__ import annotations

import fnmatch
import re
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = [
    "AUTO_CUMULATIVE_PATTERNS",
    "NEVER_CUMULATIVE_MARKERS",
    "RateState",
    "is_cumulative",
    "rates_for_batch",
    "to_rates",
]

# ---------------------------------------------------------------------------------------------
# Which counters are cumulative
# ---------------------------------------------------------------------------------------------

#: Case-insensitive fnmatch globs for counter names that are unmistakably running totals.
#: Deliberately short: a counter wrongly treated as cumulative is destroyed (its values become
#: differences), while one wrongly left alone is merely stored raw, so doubtful names stay out.
#: Users add their own globs through ``is_cumulative(..., user_globs=...)``.
AUTO_CUMULATIVE_PATTERNS: tuple[str, ...] = (
    "*octets*",           # interface octet totals: ifInOctets, ifHCOutOctets, "Octets Received"
    "*bytes_total*",      # exporter-style byte totals: rx_bytes_total, disk_read_bytes_total
    "*packets_total*",    # rx_packets_total, tx_packets_total_eth0
    "*_total",            # the conventional suffix for monotonic totals (see the exclusions below)
    "*counter64*",        # names that carry their SNMP type: "ifHCInUcastPkts (Counter64)"
    "*counter32*",
    "*ifhc*pkts*",        # 64-bit interface packet totals: ifHCInUcastPkts, ifHCOutBroadcastPkts
    "*ifin*pkts*",        # 32-bit interface packet totals: ifInUcastPkts, ifInNUcastPkts
    "*ifout*pkts*",
    "*ifinerrors*",
    "*ifouterrors*",
    "*ifindiscards*",
    "*ifoutdiscards*",
)

#: A name containing any of these (case-insensitive substring) is never cumulative, whatever
#: glob matched it: it already is a rate or a ratio.  ``'/s'`` also covers ``'/sec'``,
#: ``'/second'``; ``'per sec'`` also covers ``'per second'``.  Being a plain substring test,
#: ``'rate'`` also excludes words such as "generated" or "migrated"; that errs on the safe side.
NEVER_CUMULATIVE_MARKERS: tuple[str, ...] = (
    "/s",
    "per sec",
    "per_sec",
    "per-sec",
    "persec",
    "rate",
    "%",
)

#: ``*_total`` names that are sizes, not running totals (``mem_total`` is installed memory).
#: Only applied to the automatic patterns; a user glob that matches one of these wins.
_CAPACITY_TOTALS: tuple[str, ...] = (
    "*mem_total",
    "*memory_total",
    "*swap_total",
    "*disk_total",
    "*space_total",
    "*size_total",
    "*capacity_total",
    "*limit_total",
    "*inodes_total",
)


def _compile_globs(globs: tuple[str, ...]) -> re.Pattern[str] | None:
    if not globs:
        return None
    return re.compile("|".join(f"(?:{fnmatch.translate(g.lower())})" for g in globs))


_AUTO_RE = _compile_globs(AUTO_CUMULATIVE_PATTERNS)
_CAPACITY_RE = _compile_globs(_CAPACITY_TOTALS)


@lru_cache(maxsize=64)
def _user_re(globs: tuple[str, ...]) -> re.Pattern[str] | None:
    return _compile_globs(globs)


def is_cumulative(counter_name: str, user_globs: tuple[str, ...] = ()) -> bool:
    """Whether ``counter_name`` should be stored as a per-second rate.

    True when the name matches one of ``user_globs`` or :data:`AUTO_CUMULATIVE_PATTERNS`
    (case-insensitive fnmatch, whole name), unless it contains one of
    :data:`NEVER_CUMULATIVE_MARKERS`, which always wins.
    """
    name = counter_name.strip().lower()
    if not name or any(m in name for m in NEVER_CUMULATIVE_MARKERS):
        return False
    user = _user_re(tuple(user_globs))
    if user is not None and user.match(name):
        return True
    assert _AUTO_RE is not None and _CAPACITY_RE is not None
    return bool(_AUTO_RE.match(name)) and not _CAPACITY_RE.match(name)


# ---------------------------------------------------------------------------------------------
# Rates
# ---------------------------------------------------------------------------------------------

_TWO32 = 4294967296.0                 # 2**32, exact in float64
_TWO64 = 18446744073709551616.0       # 2**64, exact in float64
_HALF32 = 2147483648.0
_HALF64 = 9223372036854775808.0
_US_PER_S = 1_000_000.0


@dataclass(slots=True)
class RateState:
    """The baseline of one cumulative counter, carried from one batch to the next."""

    last_ts: int        # microseconds since the epoch, UTC
    last_value: float


def _sort_by_counter_then_time(
    idx: np.ndarray, ts: np.ndarray, vals: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The samples stably sorted by (idx, ts); the inputs themselves when already in order."""
    n = idx.size
    if n < 2:
        return idx, ts, vals
    t0 = int(ts.min())
    shift = (int(ts.max()) - t0).bit_length()
    idx_max = int(idx.max())
    if idx_max < 65536 and bool(np.all(ts[1:] >= ts[:-1])):
        # Time-ordered input (the usual file order): a stable sort by counter alone is enough,
        # and numpy sorts 16-bit keys stably by radix, faster than any 64-bit key.
        if bool(np.all(idx[1:] >= idx[:-1])):
            return idx, ts, vals
        order = np.argsort(idx.astype(np.uint16), kind="stable")
    elif idx_max.bit_length() + shift <= 63:
        # One int64 key: counter in the high bits, time offset in the low bits.
        key = idx.astype(np.int64)
        key <<= shift
        key |= ts - np.int64(t0)
        if bool(np.all(key[1:] >= key[:-1])):
            return idx, ts, vals
        order = np.argsort(key, kind="stable")
        del key
    else:
        up = idx[1:] > idx[:-1]
        up |= (idx[1:] == idx[:-1]) & (ts[1:] >= ts[:-1])
        if bool(up.all()):
            return idx, ts, vals
        order = np.lexsort((ts, idx))
    return idx[order], ts[order], vals[order]


def _group_starts(gi: np.ndarray) -> np.ndarray:
    starts = np.empty(gi.size, dtype=bool)
    if gi.size:
        starts[0] = True
        np.not_equal(gi[1:], gi[:-1], out=starts[1:])
    return starts


def _rates_sorted(
    gi: np.ndarray, gt: np.ndarray, gv: np.ndarray, states: dict[int, RateState]
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int, int]:
    """The core, on finite samples already sorted by (counter, time); updates ``states``."""
    n = gi.size
    if n == 0:
        return np.empty(0, np.int32), np.empty(0, np.int64), np.empty(0, np.float64), 0, 0
    starts = _group_starts(gi)
    start_pos = np.flatnonzero(starts)
    counters = gi[start_pos]
    n_groups = counters.size

    # Per-counter baseline carried in from earlier batches (one cheap loop per counter).
    base_has = np.zeros(n_groups, dtype=bool)
    base_ts = np.zeros(n_groups, dtype=np.int64)
    base_val = np.zeros(n_groups, dtype=np.float64)
    for g, c in enumerate(counters.tolist()):
        st = states.get(c)
        if st is not None:
            base_has[g] = True
            base_ts[g] = st.last_ts
            base_val[g] = st.last_value

    # Skip repeated timestamps (keep the first of each run) ...
    drop = np.empty(n, dtype=bool)
    drop[0] = False
    np.equal(gt[1:], gt[:-1], out=drop[1:])
    drop[start_pos] = False
    any_drop = bool(drop.any())
    # ... and samples not later than the baseline: within a counter they are sorted, so only
    # counters whose first sample is stale have any, and those are found by bisection.
    stale = np.flatnonzero(base_has & (gt[start_pos] <= base_ts))
    if stale.size:
        ends = np.append(start_pos[1:], n)
        for g in stale.tolist():
            a, b = int(start_pos[g]), int(ends[g])
            drop[a : a + int(np.searchsorted(gt[a:b], base_ts[g], side="right"))] = True
        any_drop = True
    if any_drop:
        keep = ~drop
        gi, gt, gv = gi[keep], gt[keep], gv[keep]
        n = gi.size
        if n == 0:
            return gi, gt, gv, 0, 0
        starts = _group_starts(gi)
        start_pos = np.flatnonzero(starts)
        gidx = np.searchsorted(counters, gi[start_pos])
        base_has, base_ts, base_val = base_has[gidx], base_ts[gidx], base_val[gidx]
    del drop

    # Differences to the previous sample, or to the carried baseline at a counter's start.
    first_t = gt[start_pos]
    first_v = gv[start_pos]
    delta = np.empty(n, dtype=np.float64)
    np.subtract(gv[1:], gv[:-1], out=delta[1:])
    delta[start_pos] = np.where(base_has, first_v - base_val, 0.0)
    dt_us = np.empty(n, dtype=np.int64)
    np.subtract(gt[1:], gt[:-1], out=dt_us[1:])
    dt_us[start_pos] = np.where(base_has, first_t - base_ts, 1)

    wraps = resets = 0
    no_rate = start_pos[~base_has]
    drop_pos = np.flatnonzero(delta < 0)   # starts without a baseline have delta 0
    if drop_pos.size:
        before = gv[drop_pos - 1]
        at_start = starts[drop_pos]
        if at_start.any():
            before[at_start] = base_val[np.searchsorted(start_pos, drop_pos[at_start])]
        after = gv[drop_pos]
        fix32 = (_TWO32 - before) + after
        fix64 = (_TWO64 - before) + after
        ok = after >= 0
        wrap32 = ok & (before <= _TWO32 - 1) & (fix32 < _HALF32)
        # 2**64 - 1 rounds to 2**64 in float64, hence <= rather than <.
        wrap64 = ok & ~wrap32 & (before <= _TWO64) & (fix64 < _HALF64)
        reset = ~(wrap32 | wrap64)
        delta[drop_pos] = np.where(wrap32, fix32, fix64)
        resets = int(np.count_nonzero(reset))
        wraps = int(drop_pos.size) - resets
        if resets:
            no_rate = np.concatenate((no_rate, drop_pos[reset]))

    # New baselines: the last usable sample of every counter in the batch.
    last_pos = np.append(start_pos[1:] - 1, n - 1)
    for c, t, v in zip(gi[last_pos].tolist(), gt[last_pos].tolist(), gv[last_pos].tolist()):
        states[c] = RateState(last_ts=t, last_value=v)

    seconds = dt_us / _US_PER_S
    del dt_us
    rates = np.divide(delta, seconds, out=delta)
    if no_rate.size == 0:
        return gi, gt, rates, wraps, resets
    emit = np.ones(n, dtype=bool)
    emit[no_rate] = False
    return gi[emit], gt[emit], rates[emit], wraps, resets


def rates_for_batch(
    idx: np.ndarray,
    ts_us: np.ndarray,
    values: np.ndarray,
    cumulative: np.ndarray,
    states: dict[int, RateState],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int, int]:
    """Replace the cumulative counters' samples in one batch by their per-second rates.

    ``idx`` (int32 counter indices, any order), ``ts_us`` (int64 UTC microseconds) and
    ``values`` (float64) are parallel arrays; ``cumulative`` is a bool array indexed by counter
    index.  ``states`` maps counter index -> :class:`RateState` and is updated in place (new
    objects are stored; the old ones are not mutated).

    Returns ``(idx, ts, value, wraps, resets)``: first the non-cumulative samples, unchanged and
    in input order, then the rates, sorted by (counter, time).  The inputs are never modified,
    but the returned arrays may be (or share memory with) them; in particular, when the batch
    holds no cumulative sample the input arrays themselves are returned.
    """
    idx = np.asarray(idx)
    ts_us = np.asarray(ts_us, dtype=np.int64)
    values = np.asarray(values, dtype=np.float64)
    cumulative = np.asarray(cumulative, dtype=bool)
    if not (idx.shape == ts_us.shape == values.shape) or idx.ndim != 1:
        raise ValueError("idx, ts_us and values must be 1-d arrays of one length")
    if idx.size == 0:
        return idx, ts_us, values, 0, 0
    if int(idx.min()) < 0:
        raise ValueError("counter indices must be non-negative")

    is_cum = cumulative[idx]
    n_cum = int(np.count_nonzero(is_cum))
    if n_cum == 0:
        return idx, ts_us, values, 0, 0
    if n_cum == idx.size:
        ci, ct, cv = idx, ts_us, values
    else:
        ci, ct, cv = idx[is_cum], ts_us[is_cum], values[is_cum]
    finite = np.isfinite(cv)
    if not finite.all():
        ci, ct, cv = ci[finite], ct[finite], cv[finite]
    ci = ci.astype(np.int32, copy=False)
    ri, rt, rv, wraps, resets = _rates_sorted(*_sort_by_counter_then_time(ci, ct, cv), states)

    if n_cum == idx.size:
        return ri, rt, rv, wraps, resets
    gauge = ~is_cum
    out_idx = np.concatenate((idx[gauge].astype(np.int32, copy=False), ri))
    out_ts = np.concatenate((ts_us[gauge], rt))
    out_val = np.concatenate((values[gauge], rv))
    return out_idx, out_ts, out_val, wraps, resets


def to_rates(
    ts_us: np.ndarray, values: np.ndarray, state: RateState | None
) -> tuple[np.ndarray, np.ndarray, RateState | None, int, int]:
    """Per-second rates of ONE cumulative counter; see the module docstring for the rules.

    Returns ``(rate_ts, rates, new_state, wraps, resets)``.  ``new_state`` is ``state`` itself
    when the batch held no usable sample (``None`` if there never was one).
    """
    ts_us = np.asarray(ts_us, dtype=np.int64)
    values = np.asarray(values, dtype=np.float64)
    states: dict[int, RateState] = {} if state is None else {0: state}
    _, rate_ts, rates, wraps, resets = rates_for_batch(
        np.zeros(ts_us.shape, dtype=np.int32), ts_us, values, np.ones(1, dtype=bool), states
    )
    return rate_ts, rates, states.get(0), wraps, resets
