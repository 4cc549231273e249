"""`warehouse limits`: how long, how often and for how long at a stretch each counter was beyond
its warning and critical levels.

Levels come from `<home>/limits.toml` (the user's, read first: its entries win) and from a small
default set shipped here (dropped when the user's file says `include_defaults = false`). A
counter takes the first entry whose globs match its key. Each entry may name the unit its levels
are in; a counter in another time unit (s, ms, us) gets the levels converted, a counter in an
unrelated unit is skipped, and a counter without a unit takes the levels as written.
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from warehouse.catalog import match_counters
from warehouse.errors import UnknownCounterError, WarehouseError
from warehouse.home import Warehouse
from warehouse.timeutil import local_datetime, parse_period

USER_FILE = "limits.toml"
BLOCK = 64
TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6}
KEYS = ("period", "first_ts", "last_ts", "files", "counters", "results", "cautions")
ROW_KEYS = ("key", "unit", "direction", "warn", "critical", "n", "interval_seconds", "warn_seconds", "warn_share",
            "critical_seconds", "critical_share", "longest_warn_seconds", "longest_warn_start",
            "longest_critical_seconds", "longest_critical_start", "peak", "rule", "source")

DEFAULTS = """\
# Default levels shipped with the warehouse. Each is common practice: a rule of thumb quoted
# widely, with no single source. Tune them to your platform in <home>/limits.toml, whose entries
# are read first; `include_defaults = false` there drops this set.

[[limit]]
counters = ["*read_latency*", "*write_latency*", "*disk*latency*"]
unit = "ms"
warn = 15          # common practice: disk read/write latency above 15 ms is felt by users
critical = 25      # common practice: above 25 ms the storage is the bottleneck
direction = "above"

[[limit]]
counters = ["*Avg. Disk sec/Read", "*Avg. Disk sec/Write", "*Avg. Disk sec/Transfer"]
unit = "ms"        # the counters are in seconds; the levels are converted
warn = 15          # common practice, as above
critical = 25      # common practice, as above
direction = "above"

[[limit]]
counters = ["*/await"]
unit = "ms"
warn = 15          # common practice, as above (average wait per request, ms)
critical = 25      # common practice, as above
direction = "above"

[[limit]]
counters = ["*/Processor/_Total/% Processor Time", "*cpu_util*", "*cpu_load*"]
warn = 80          # common practice: sustained whole-host CPU above 80 % leaves no room for peaks
critical = 90      # common practice
direction = "above"

[[limit]]
counters = ["*/%util"]
warn = 80          # common practice: a device busy more than 80 % of the time queues requests
critical = 90      # common practice
direction = "above"
"""


@dataclass(frozen=True)
class Rule:
    counters: tuple[str, ...]
    warn: float
    critical: float
    direction: str
    unit: str | None
    source: str


def _rules(text: str, source: str) -> tuple[list[Rule], bool]:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise WarehouseError(f"{source}: cannot read TOML: {exc}") from exc
    include = data.get("include_defaults", True)
    if not isinstance(include, bool):
        raise WarehouseError(f"{source}: include_defaults must be true or false")
    entries = data.get("limit", [])
    if not isinstance(entries, list):
        raise WarehouseError(f"{source}: use [[limit]] tables for the entries")
    return [_rule(e, i, source) for i, e in enumerate(entries, 1)], include


def _rule(entry: Any, i: int, source: str) -> Rule:
    where = f"{source}: limit entry {i}"
    if not isinstance(entry, dict):
        raise WarehouseError(f"{where}: not a table")
    unknown = set(entry) - {"counters", "warn", "critical", "direction", "unit"}
    if unknown:
        raise WarehouseError(f"{where}: unknown key {sorted(unknown)[0]!r} (use counters, warn, critical, direction, unit)")
    globs = entry.get("counters")
    globs = [globs] if isinstance(globs, str) else globs
    if not globs or not all(isinstance(g, str) and g for g in globs):
        raise WarehouseError(f"{where}: counters must be a glob or a list of globs")
    direction = entry.get("direction", "above")
    if direction not in ("above", "below"):
        raise WarehouseError(f"{where}: direction must be \"above\" or \"below\", got {direction!r}")
    levels = []
    for name in ("warn", "critical"):
        value = entry.get(name)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise WarehouseError(f"{where}: {name} must be a number")
        levels.append(float(value))
    warn, critical = levels
    if (critical < warn) if direction == "above" else (critical > warn):
        raise WarehouseError(f"{where}: critical ({critical:g}) must be beyond warn ({warn:g}) in direction {direction}")
    unit = entry.get("unit")
    if unit is not None and not isinstance(unit, str):
        raise WarehouseError(f"{where}: unit must be text")
    return Rule(tuple(globs), warn, critical, direction, unit, source)


def load_rules(home: Path, limits_file: Path | None = None) -> tuple[list[Rule], list[str]]:
    """The user's rules (`limits_file`, else <home>/limits.toml) then, unless dropped, the defaults;
    and the files they came from."""
    path = limits_file or home / USER_FILE
    if limits_file is not None and not limits_file.is_file():
        raise WarehouseError(f"{limits_file}: no such limits file")
    rules: list[Rule] = []
    files: list[str] = []
    include = True
    if path.exists():
        rules, include = _rules(path.read_text(encoding="utf-8"), str(path))
        files.append(str(path))
    if include:
        rules += _rules(DEFAULTS, "defaults")[0]
        files.append("defaults")
    return rules, files


def _factor(rule: Rule, unit: str) -> float | None:
    """Multiply a rule's levels by this to get them in the counter's unit; None: does not apply."""
    if rule.unit is None or not unit or rule.unit == unit:
        return 1.0
    if rule.unit in TIME_UNITS and unit in TIME_UNITS:
        return TIME_UNITS[rule.unit] / TIME_UNITS[unit]
    return None


def assign(wh: Warehouse, rules: list[Rule], selector: str | None) -> dict[int, tuple[Rule, str, float]]:
    """counter_id -> (rule, glob that matched, unit factor): the first matching rule per counter."""
    allowed = set(match_counters(wh, selector)) if selector else None
    units = dict(wh.con.execute("SELECT counter_id, coalesce(unit, '') FROM counters").fetchall())
    chosen: dict[int, tuple[Rule, str, float]] = {}
    for rule in rules:
        for glob in rule.counters:
            try:
                ids = match_counters(wh, glob)
            except UnknownCounterError:
                continue
            for cid in ids:
                factor = _factor(rule, units[cid])
                if cid in chosen or factor is None or (allowed is not None and cid not in allowed):
                    continue
                chosen[cid] = (rule, glob, factor)
    return chosen


def _runs(beyond: np.ndarray, ts: np.ndarray, interval: float) -> tuple[int, int]:
    """(length, start index) of the longest run of consecutive samples beyond; a gap longer than
    twice the interval ends a run."""
    if not beyond.any():
        return 0, -1
    breaks = np.r_[True, np.diff(ts) > 2 * interval] if ts.size > 1 else np.array([True])
    new_run = beyond & (breaks | ~np.r_[False, beyond[:-1]])
    run_id = np.cumsum(new_run)
    ids = run_id[beyond]
    counts = np.bincount(ids)
    longest = int(np.argmax(counts))
    start = int(np.flatnonzero(beyond & (run_id == longest))[0])
    return int(counts[longest]), start


def measure(ts: np.ndarray, v: np.ndarray, warn: float, critical: float, direction: str, zone: str) -> dict[str, Any]:
    """Time, share and longest run beyond each level for one counter's samples in time order.

    Each sample stands for one sampling interval (the median gap between samples)."""
    sign = 1.0 if direction == "above" else -1.0
    interval = float(np.median(np.diff(ts))) / 1e6 if ts.size > 1 else math.nan
    out: dict[str, Any] = {"n": int(v.size), "interval_seconds": interval,
                           "peak": float(v.max() if sign > 0 else v.min())}
    for name, level in (("warn", warn), ("critical", critical)):
        beyond = sign * v > sign * level
        count, start = _runs(beyond, ts, interval * 1e6)
        out[f"{name}_seconds"] = float(beyond.sum()) * interval
        out[f"{name}_share"] = float(beyond.mean())
        out[f"longest_{name}_seconds"] = count * interval
        out[f"longest_{name}_start"] = local_datetime(int(ts[start]), zone) if start >= 0 else None
    return out


def _range(wh: Warehouse, period: str | None) -> tuple[int, int, str]:
    if not period:
        return -(2 ** 62), 2 ** 62, "all"
    p = parse_period(period, wh.zone)
    return p.start_us, p.end_us, p.label


def check_limits(wh: Warehouse, period: str | None = None, selector: str | None = None,
                 top: int = 50, limits_file: Path | None = None) -> dict[str, Any]:
    """Everything `warehouse limits` reports, with the stable keys of KEYS."""
    if top < 1:
        raise WarehouseError(f"--top must be at least 1, got {top}")
    rules, files = load_rules(wh.home, limits_file)
    chosen = assign(wh, rules, selector)
    lo, hi, label = _range(wh, period)
    meta = dict(wh.con.execute("SELECT counter_id, key FROM counters").fetchall())
    units = dict(wh.con.execute("SELECT counter_id, coalesce(unit, '') FROM counters").fetchall())
    rows, first, last = [], None, None
    ids = sorted(chosen)
    for at in range(0, len(ids), BLOCK):
        part = ids[at:at + BLOCK]
        data = wh.con.execute(
            "SELECT counter_id, epoch_us(ts) AS t, value FROM points WHERE counter_id IN (SELECT unnest($i::INTEGER[]))"
            " AND ts >= make_timestamptz($lo) AND ts < make_timestamptz($hi) ORDER BY counter_id, ts",
            {"i": part, "lo": lo, "hi": hi}).fetchnumpy()
        cid, t, v = (np.asarray(data[c]) for c in ("counter_id", "t", "value"))
        edges = np.flatnonzero(np.r_[True, cid[1:] != cid[:-1], True]) if cid.size else np.array([0])
        for a, b in zip(edges[:-1], edges[1:]):
            rule, glob, factor = chosen[int(cid[a])]
            m = measure(t[a:b].astype(np.int64), v[a:b].astype(np.float64), rule.warn * factor,
                        rule.critical * factor, rule.direction, wh.zone)
            first = t[a] if first is None else min(first, t[a])
            last = t[b - 1] if last is None else max(last, t[b - 1])
            rows.append({"key": meta[int(cid[a])], "unit": units[int(cid[a])], "direction": rule.direction,
                         "warn": rule.warn * factor, "critical": rule.critical * factor, **m,
                         "rule": glob, "source": rule.source})
    if not rows:
        raise WarehouseError(f"no counter with a limit has samples in {label if period else 'the warehouse'}"
                             + (f" among {selector!r}" if selector else "")
                             + f" (limits from {', '.join(files) or 'nowhere'})")
    rows.sort(key=lambda r: (-r["critical_share"], -r["warn_share"], r["key"]))
    result = {"period": label, "first_ts": local_datetime(int(first), wh.zone),
              "last_ts": local_datetime(int(last), wh.zone), "files": files, "counters": len(rows),
              "results": [{k: r[k] for k in ROW_KEYS} for r in rows[:top]],
              "cautions": ["Levels from the default set are rules of thumb (common practice), not the limits of your"
                           " hardware: set your own in limits.toml.",
                           "Time beyond a level counts each sample as one sampling interval: with long intervals a"
                           " short spike is either missed or stretched to a whole interval."]}
    return {k: result[k] for k in KEYS}
