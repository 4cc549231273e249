"""Patterns benchmark: `find_patterns` against a plain pandas + scipy.signal.periodogram loop.

Usage (from the project root, in the venv):

    python bench/patterns.py                  # everything below, once each
    python bench/patterns.py --repeat 3       # best wall of 3 per alternative (peak RSS: the largest)
    python bench/patterns.py --only ours-one,plain-one
    python bench/patterns.py --quick          # fleet cut to 10 hosts x 10 counters x 7 days
    python bench/patterns.py --only ours-glob --profile bench/out/prof

Data (invented; built once through our own ingest from generated CSVs and cached under bench/out/):
  one counter  `array01/pool_db_write_iops`, one sample a minute for 90 days (129,600 points): a
               business-hours bump (weaker at weekends), a 3-minute job every 13 minutes, AR(1)
               noise, a level step on day 52 and night-time bursts.
  fleet        50 hosts x 10 counters (`node*/*`), one sample a minute for the last 14 days of
               that range (10.08 M points): a daily rhythm per counter plus AR(1) noise; on every
               second host one counter also carries a periodic job (periods 7 min .. 193 min,
               none close to a whole fraction of a day, heights 1 to 4 noise sd). Both share the day-partitioned
               Parquet files, so every read below must skip the other data set's rows.

Alternatives, each in its own child process (wall: the whole child, start-up and imports included;
work: timed inside the child after its imports of numpy, pandas, pyarrow, scipy and our package;
peak: the child's own maximum resident set size):
  ours-one        find_patterns (warehouse.patterns) on the one counter with the default request
                  (1-minute buckets, periods 2 min .. 8 days, episodes above p95); "compute" is the
                  time inside stats.patterns.find_periods + episodes + change_points, measured by
                  wrapping those three functions; the rest of "work" is the read and the calendar,
                  clustering and hourly-means steps.
  ours-one-again  ours-one, then the same three compute calls on the same arrays 7 more times
                  (best / median / worst shown; not compared). The compute goal is judged on the
                  best of these, the run least disturbed by other work on a shared machine.
  ours-one-again-1t, ours-glob-1t
                  the same as ours-one-again and ours-glob with OPENBLAS_NUM_THREADS=1 in the child.
                  find_periods' dot products (detrending, the ACF checks) go to OpenBLAS, which
                  splits a dot product of more than 10,000 values over threads; on two busy cores
                  that costs more than it saves, so these rows show the difference.
  plain-one       pd.read_parquet of the committed Parquet files filtered to that counter id,
                  resample to 1 min (mean), scipy.signal.periodogram, the top peak (bin 0 excluded).
  ours-glob       warehouse.patterns has no per-counter mode (a glob is combined into one series),
                  so this calls warehouse.series.blocks (one streamed read, BLOCK_COUNTERS counters
                  a block) and stats.patterns.find_periods on each column, same band as ours-one.
  plain-glob      pd.read_parquet of all 500 counters (filtered to their ids), pivot to one column
                  per counter, resample to 1 min, then a periodogram and top peak per column.
  ours-glob-b64   ours-glob reading blocks of 64 counters instead of the default, to show what the
                  block size does to peak memory and time.
  ours-glob-full  ours-glob plus everything else find_patterns does per series (threshold, episodes,
                  clustering, calendar, level shifts), on each column of the same streamed blocks.
  ours-each       find_patterns called once per counter key (500 reads through the public API).

Peak memory: the brief asked for resource.getrusage(RUSAGE_CHILDREN) before and after each child.
Its ru_maxrss is the largest child waited for so far, not a sum, so a before/after difference reads
0 whenever an earlier child was bigger; and a child forked from this (large) parent starts from the
parent's size. So the children are started by the small launcher in bench/warehouse_fixture.py,
which takes the child's own rusage from os.wait4 -- the same counter, per child.

This is a measuring tool, not a test: nothing here asserts; checks and goals are printed as met or
missed. The machine is shared: the 1-minute load average at each child's start is printed with it.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import sys
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402

SCRIPT = Path(__file__).resolve()
ALTERNATIVES = ("ours-one", "ours-one-again", "ours-one-again-1t", "plain-one", "ours-glob", "plain-glob",
                "ours-glob-1t", "ours-glob-b64", "ours-glob-full", "ours-each")
BASE = {"plain-one": "ours-one", "plain-glob": "ours-glob", "ours-glob-1t": "ours-glob", "ours-glob-b64": "ours-glob",
        "ours-glob-full": "ours-glob", "ours-each": "ours-glob"}
# Environment for one alternative's child only (on top of --blas-threads, if given).
ONE_BLAS_THREAD = {"OPENBLAS_NUM_THREADS": "1"}
CHILD_ENV = {"ours-one-again-1t": ONE_BLAS_THREAD, "ours-glob-1t": ONE_BLAS_THREAD}
SMALL_BLOCK = 64
SOURCE = "bench"
START = "2026-01-05T00:00:00"           # a Monday, UTC
DAY = 86_400
TOLERANCE = 0.02                        # a period counts as found within 2%
BUCKET = "1m"
MIN_PERIOD_S = 120
MAX_PERIOD_S = 8 * DAY

SOLO_HOST, SOLO_COLUMN = "array01", "pool_db_write_iops"
FLEET_GLOB = "node*/*"
# name, baseline, daily swing, noise sd, decimals (0: whole numbers; 3: multiples of 1/8)
FLEET_COLUMNS = (
    ("cpu_busy_pct", 35.0, 20.0, 5.0, 0),
    ("run_queue", 4.0, 2.5, 1.2, 0),
    ("mem_used_mb", 12_000.0, 2_500.0, 300.0, 0),
    ("net_in_kbps", 30_000.0, 18_000.0, 6_000.0, 0),
    ("net_out_kbps", 20_000.0, 12_000.0, 4_500.0, 0),
    ("disk_read_iops", 900.0, 500.0, 160.0, 0),
    ("disk_write_iops", 600.0, 350.0, 120.0, 0),
    ("disk_latency_ms", 4.0, 1.5, 0.7, 3),
    ("tcp_conns", 400.0, 220.0, 45.0, 0),
    ("ctx_switches_per_sec", 20_000.0, 7_000.0, 2_500.0, 0),
)
# A day is not close to a whole number of any of these periods (1440 / P is at least 0.3 from an
# integer where that integer is <= 32): a job every 131 min (1440 / 131 = 10.99) is, over two
# weeks, the same frequency as the daily rhythm's 11th harmonic, and is rightly grouped with it.
PLANT_MINUTES = (7, 11, 13, 17, 23, 29, 37, 47, 67, 93, 137, 193)
PLANT_HEIGHTS = (1.0, 1.5, 2.5, 4.0)


@dataclass(frozen=True)
class Plan:
    solo_days: float = 90.0
    hosts: int = 50
    fleet_days: float = 14.0
    interval: int = 60
    period_s: int = 13 * 60             # the one counter's planted job
    job_s: int = 3 * 60                 # ... and how long it runs
    seed: int = 23
    version: int = 2

    @property
    def solo_rows(self) -> int:
        return int(round(self.solo_days * DAY / self.interval))

    @property
    def fleet_rows(self) -> int:
        return int(round(self.fleet_days * DAY / self.interval))

    @property
    def fleet_first(self) -> int:
        """Row of the solo range where the fleet starts (its last fleet_days)."""
        return self.solo_rows - self.fleet_rows

    @property
    def solo_key(self) -> str:
        return f"{SOLO_HOST}/{SOLO_COLUMN}"

    def host(self, h: int) -> str:
        return f"node{h:02d}"

    def slug(self) -> str:
        return (f"patterns-{self.solo_days:g}d-{self.hosts}x{len(FLEET_COLUMNS)}-{self.fleet_days:g}d"
                f"-{self.interval}s-seed{self.seed}-v{self.version}")


def full_plan() -> Plan:
    return Plan()


def quick_plan() -> Plan:
    return Plan(hosts=10, fleet_days=7.0)


def planted(plan: Plan) -> dict[str, dict[str, float]]:
    """Fleet counters that carry a periodic job: key -> {seconds, height (noise sd), width (buckets)}."""
    out = {}
    for h in range(0, plan.hosts, 2):
        i = h // 2
        minutes = PLANT_MINUTES[i % len(PLANT_MINUTES)]
        column = FLEET_COLUMNS[i % len(FLEET_COLUMNS)][0]
        out[f"{plan.host(h)}/{column}"] = {"seconds": minutes * 60.0,
                                           "height": PLANT_HEIGHTS[i % len(PLANT_HEIGHTS)],
                                           "width": max(2, round(minutes / 6))}
    return out


# -- generation ------------------------------------------------------------------------------------

def _ar1(rng, n: int, phi: float, sd: float):
    import numpy as np
    from scipy.signal import lfilter

    z = lfilter([1.0], [1.0, -phi], rng.standard_normal(n))
    return z * (sd / np.std(z))


def _stamps(first_row: int, rows: int, interval: int):
    import numpy as np

    start = np.datetime64(START, "s")
    secs = (first_row + np.arange(rows, dtype=np.int64)) * interval
    return secs, np.char.add(np.datetime_as_string(start + secs.astype("timedelta64[s]"), unit="s"), "Z")


def _write_csv(path: Path, stamps, columns: dict[str, tuple]) -> None:
    """A wide CSV: timestamp, then one column per counter; values whole or multiples of 2**-places."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pacsv

    arrays = [pa.array(stamps, pa.string())]
    for values, places in columns.values():
        if places == 0:
            arrays.append(pa.array(np.rint(values).astype(np.int64), pa.int64()))
        else:
            arrays.append(pa.array(np.ldexp(np.rint(np.ldexp(values, places)), -places), pa.float64()))
    table = pa.Table.from_arrays(arrays, names=["timestamp", *columns])
    pacsv.write_csv(table, path, pacsv.WriteOptions(quoting_style="none"))


def _business_day(secs, weekend: float):
    """0..1 bump over the working day (peak mid-afternoon), scaled down to `weekend` on Sat/Sun."""
    import numpy as np

    hour = (secs % DAY) / 3600.0
    bump = np.clip(np.sin(np.pi * (hour - 7.0) / 13.0), 0.0, None) ** 1.5    # 07:00 .. 20:00
    weekday = ((secs // DAY) % 7) < 5
    return bump * np.where(weekday, 1.0, weekend)


def solo_csv(plan: Plan, path: Path) -> int:
    import numpy as np

    rng = np.random.default_rng([plan.seed, 0])
    n = plan.solo_rows
    secs, stamps = _stamps(0, n, plan.interval)
    x = 2_400.0 + 1_600.0 * _business_day(secs, 0.35)
    x += np.where(secs % plan.period_s < plan.job_s, 650.0, 0.0)          # the 13-minute job
    x += _ar1(rng, n, 0.6, 260.0)
    x += np.where(secs >= 52 * DAY, 450.0, 0.0)                            # a new tenant from day 52
    for day in rng.choice(int(plan.solo_days), size=int(plan.solo_days) // 4, replace=False):
        begin = int((day * DAY + rng.uniform(0.5, 3.0) * 3600) // plan.interval)
        length = int(rng.integers(15, 90))
        x[begin:begin + length] += rng.uniform(2_000.0, 3_500.0)           # night-time bursts
    _write_csv(path, stamps, {SOLO_COLUMN: (np.clip(x, 0.0, None), 0)})
    return n


def fleet_csv(plan: Plan, h: int, path: Path, plants: dict[str, dict[str, float]]) -> int:
    import numpy as np

    rng = np.random.default_rng([plan.seed, 1, h])
    n = plan.fleet_rows
    secs, stamps = _stamps(plan.fleet_first, n, plan.interval)
    columns = {}
    for name, base, swing, noise, places in FLEET_COLUMNS:
        scale = rng.uniform(0.6, 1.4)
        shift = rng.uniform(-2.0, 2.0) * 3600.0
        x = scale * (base + swing * _business_day(secs + shift, rng.uniform(0.3, 0.8)))
        x += _ar1(rng, n, rng.uniform(0.3, 0.7), scale * noise)
        plant = plants.get(f"{plan.host(h)}/{name}")
        if plant:
            every = int(plant["seconds"]) // plan.interval
            offset = int(rng.integers(0, every))
            on = (np.arange(n) + offset) % every < plant["width"]
            x += np.where(on, plant["height"] * scale * noise, 0.0)
        columns[name] = (np.clip(x, 0.0, None), places)
    _write_csv(path, stamps, columns)
    return n * len(columns)


def ensure(plan: Plan, out: Path) -> Path:
    """The warehouse home for `plan`, built through our ingest unless a matching one is cached."""
    home = out / f"wh-{plan.slug()}"
    stamp_path = home / "fixture.json"
    want = json.loads(json.dumps(asdict(plan)))
    if stamp_path.exists():
        stamp = json.loads(stamp_path.read_text())
        if stamp.get("plan") == want:
            print(f"fixture: reusing {fx._show(home)} ({stamp['points']:,} points in {stamp['files']} files,"
                  f" {stamp['bytes'] / 2**20:.0f} MiB of Parquet)", flush=True)
            return home
    from warehouse.home import init_home
    from warehouse.ingest.run import IngestOptions, ingest_files

    shutil.rmtree(home, ignore_errors=True)
    out.mkdir(parents=True, exist_ok=True)
    init_home(home, zone="UTC")
    print(f"fixture: building {fx._show(home)} through our ingest: 1 counter x {plan.solo_rows:,} samples +"
          f" {plan.hosts * len(FLEET_COLUMNS)} counters x {plan.fleet_rows:,} samples ...", flush=True)
    plants = planted(plan)
    t0 = time.perf_counter()
    gen_s = ingest_s = 0.0
    points = 0
    jobs = [(SOLO_HOST, lambda p: solo_csv(plan, p))]
    jobs += [(plan.host(h), lambda p, h=h: fleet_csv(plan, h, p, plants)) for h in range(plan.hosts)]
    for i, (host, make) in enumerate(jobs):
        csv = out / f"fixture-{plan.slug()}-{host}.csv"
        t = time.perf_counter()
        expected = make(csv)
        gen_s += time.perf_counter() - t
        t = time.perf_counter()
        (res,) = ingest_files(home, [csv], IngestOptions(source=SOURCE, host=host))
        ingest_s += time.perf_counter() - t
        csv.unlink()
        if res.status != "loaded" or res.values_loaded != expected or res.rows_quarantined or res.cells_quarantined:
            raise SystemExit(f"fixture ingest of {host} went wrong: {res}")
        points += res.values_loaded
        print(f"  {host}: {res.values_loaded:,} values ({i + 1}/{len(jobs)})", end="\r", flush=True)
    files = list((home / "points").rglob("*.parquet"))
    stamp = {"plan": want, "points": points, "files": len(files), "bytes": sum(f.stat().st_size for f in files),
             "generate_s": round(gen_s, 1), "ingest_s": round(ingest_s, 1),
             "total_s": round(time.perf_counter() - t0, 1)}
    stamp_path.write_text(json.dumps(stamp, indent=1))
    print(f"\nfixture: {points:,} points in {len(files)} Parquet files ({stamp['bytes'] / 2**20:.0f} MiB);"
          f" generate {gen_s:.1f} s, ingest {ingest_s:.1f} s", flush=True)
    return home


# -- children ------------------------------------------------------------------------------------

class _Clock:
    """Accumulated seconds and calls per name, for wrapping library functions in a child."""

    def __init__(self) -> None:
        self.s: dict[str, float] = {}
        self.cpu: dict[str, float] = {}
        self.calls: dict[str, int] = {}
        self.args: dict[str, tuple] = {}
        self.real: dict[str, object] = {}

    def wrap(self, module, attr: str, name: str | None = None) -> None:
        fn = getattr(module, attr, None)
        if fn is None:              # not in this version of the module: nothing to time
            return
        label = name or attr
        self.real[label] = fn

        def timed(*a, **k):
            self.args[label] = (a, k)
            t0, c0 = time.perf_counter(), time.process_time()
            try:
                return fn(*a, **k)
            finally:
                self.s[label] = self.s.get(label, 0.0) + time.perf_counter() - t0
                self.cpu[label] = self.cpu.get(label, 0.0) + time.process_time() - c0
                self.calls[label] = self.calls.get(label, 0) + 1

        setattr(module, attr, timed)


# The names warehouse.patterns calls to select counters, settle the range and read the buckets.
READS = ("select", "user_range", "time_range", "combine")
INNER_REPEAT = 7

def _periods_list(periods) -> list[list[float]]:
    return [[p.seconds, p.strength, p.p] for p in periods]


def child_ours_one(job: dict, profile: str | None, again: int = 0) -> dict:
    import numpy as np

    import warehouse.patterns as wp
    from warehouse.home import open_warehouse
    from warehouse.stats import patterns as ps

    clock = _Clock()
    for attr in ("find_periods", "episodes", "change_points"):
        clock.wrap(ps, attr)
    for attr in READS:
        clock.wrap(wp, attr)
    for attr in ("calendar", "clustering", "_changes"):
        clock.wrap(wp, attr)
    seen = {}
    real_combine = wp.combine

    def combine_and_keep(*a, **k):
        res = real_combine(*a, **k)
        v = res.values[np.isfinite(res.values)]
        seen.update(n=int(v.size), total=float(v.sum()))
        return res

    wp.combine = combine_and_keep

    def run() -> dict:
        t0 = time.perf_counter()
        with open_warehouse(job["home"]) as wh:
            clock.s["open"] = time.perf_counter() - t0
            t0 = time.perf_counter()
            res = wp.find_patterns(wh, wp.PatternRequest(selector=job["solo_key"], bucket=BUCKET))
            clock.s["find_patterns"] = time.perf_counter() - t0
            return res

    res = fx.profile_call(run, profile)
    s, cpu = clock.s, clock.cpu
    stats = ("find_periods", "episodes", "change_points")
    work_s = time.perf_counter() - job["t0"]
    repeats = []
    for _ in range(again):                  # the same three calls on the same arrays, for a less noisy figure
        t0 = time.perf_counter()
        for name in stats:
            a, k = clock.args[name]
            clock.real[name](*a, **k)
        repeats.append(time.perf_counter() - t0)
    return {"periods": [[p["seconds"], p["strength"], p["p"]] for p in res["periods"]],
            "episodes": len(res["episodes"]), "clustered": res["episode_clustering"]["clustered"],
            "change_points": [str(c["ts"]) for c in res["change_points"]], "buckets": seen["n"],
            "total": seen["total"],
            "compute_s": sum(s[a] for a in stats), "compute_cpu_s": sum(cpu[a] for a in stats),
            "compute_again_s": repeats, "find_patterns_work_s": work_s,
            "open_s": s["open"], "find_patterns_s": s["find_patterns"],
            "parts": {"read": sum(s.get(a, 0.0) for a in READS), "find_periods": s["find_periods"],
                      "episodes": s["episodes"], "change_points": s["change_points"],
                      "hourly_prep": s["_changes"] - s["change_points"], "calendar": s["calendar"],
                      "clustering": s["clustering"]}}


def _top_peak(x, dt: float, lo_s: float, hi_s: float) -> float:
    """Period (s) of the highest periodogram bin with period in [lo_s, hi_s] (bin 0 never)."""
    import numpy as np
    from scipy import signal

    f, p = signal.periodogram(x, fs=1.0 / dt)
    with np.errstate(divide="ignore"):
        period = 1.0 / f
    band = np.flatnonzero((f > 0) & (period >= lo_s) & (period <= hi_s))
    return float(period[band[np.argmax(p[band])]])


def child_plain_one(job: dict, profile: str | None) -> dict:
    import pandas as pd

    def run() -> dict:
        df = pd.read_parquet(job["files"], columns=["ts", "value"], filters=[("counter_id", "==", job["solo_id"])])
        s = df.set_index("ts")["value"].sort_index().resample("1min").mean()
        x = s.interpolate().to_numpy()
        t0, c0 = time.perf_counter(), time.process_time()
        top = _top_peak(x, 60.0, MIN_PERIOD_S, MAX_PERIOD_S)
        compute_s, compute_cpu_s = time.perf_counter() - t0, time.process_time() - c0
        return {"top": top, "top_under_1h": _top_peak(x, 60.0, MIN_PERIOD_S, 3600.0),
                "compute_s": compute_s, "compute_cpu_s": compute_cpu_s,
                "buckets": int(s.notna().sum()), "total": float(s.sum())}

    return fx.profile_call(run, profile)


def _max_period(n: int, bucket_s: int) -> float:
    return float(min(MAX_PERIOD_S, n * bucket_s / 2))


def child_ours_glob(job: dict, profile: str | None, full: bool, size: int | None = None) -> dict:
    import numpy as np
    import pandas as pd

    import warehouse.patterns as wp
    from warehouse.home import open_warehouse
    from warehouse.series import BLOCK_COUNTERS, blocks, grid_for, select, time_range
    from warehouse.stats import patterns as ps

    def run() -> dict:
        out: dict = {"periods": {}, "total": 0.0, "buckets": 0, "episodes": 0, "change_points": 0}
        read_s = compute_s = compute_cpu_s = 0.0
        widths = []
        with open_warehouse(job["home"]) as wh:
            t0 = time.perf_counter()
            counters = select(wh, job["glob"])
            ids = [c.counter_id for c in counters]
            key = {c.counter_id: c.key for c in counters}
            lo, hi = time_range(wh, ids, None, None)
            grid = grid_for(lo, hi, 60)
            read_s += time.perf_counter() - t0
            max_p = _max_period(grid.n, 60)
            local = pd.DatetimeIndex(pd.to_datetime(grid.times, unit="us", utc=True)).tz_convert(wh.zone)
            stream = blocks(wh, ids, grid, size or BLOCK_COUNTERS)
            while True:
                t0 = time.perf_counter()
                try:
                    part, block = next(stream)
                except StopIteration:
                    break
                read_s += time.perf_counter() - t0
                widths.append(len(part))
                t0, c0 = time.perf_counter(), time.process_time()
                for j, cid in enumerate(part):
                    x = block[:, j]
                    have = np.isfinite(x)
                    out["buckets"] += int(have.sum())
                    out["total"] += float(x[have].sum())
                    found = ps.find_periods(x, 60.0, min_period=float(MIN_PERIOD_S), max_period=max_p)
                    out["periods"][key[cid]] = _periods_list(found)
                    if full:
                        threshold, _ = wp._threshold("p95", x[have])
                        eps = ps.episodes(x, grid.times, threshold, gap_buckets=5, bucket_us=grid.bucket_us)
                        wp.clustering(eps, local, have, wh.zone)
                        wp.calendar(x, local)
                        out["episodes"] += len(eps)
                        out["change_points"] += len(wp._changes(x, local, wh.zone))
                compute_s += time.perf_counter() - t0
                compute_cpu_s += time.process_time() - c0
                del block
        out.update(read_s=read_s, compute_s=compute_s, compute_cpu_s=compute_cpu_s, blocks=widths,
                   block_counters=size or BLOCK_COUNTERS,
                   grid_n=grid.n, counters=len(ids))
        return out

    return fx.profile_call(run, profile)


def child_ours_each(job: dict, profile: str | None) -> dict:
    import warehouse.patterns as wp
    from warehouse.home import open_warehouse
    from warehouse.series import select

    def run() -> dict:
        out: dict = {"periods": {}}
        with open_warehouse(job["home"]) as wh:
            keys = [c.key for c in select(wh, job["glob"])]
            for key in keys:
                res = wp.find_patterns(wh, wp.PatternRequest(selector=key, bucket=BUCKET))
                out["periods"][key] = [[p["seconds"], p["strength"], p["p"]] for p in res["periods"]]
        out["counters"] = len(keys)
        return out

    return fx.profile_call(run, profile)


def child_plain_glob(job: dict, profile: str | None) -> dict:
    import pandas as pd

    def run() -> dict:
        df = pd.read_parquet(job["files"], columns=["ts", "counter_id", "value"],
                             filters=[("counter_id", "in", job["glob_ids"])])
        wide = df.pivot(index="ts", columns="counter_id", values="value")
        del df
        wide = wide.resample("1min").mean()
        t0, c0 = time.perf_counter(), time.process_time()
        top = {}
        max_p = _max_period(len(wide), 60)
        for cid in wide.columns:
            top[str(cid)] = _top_peak(wide[cid].interpolate().to_numpy(), 60.0, MIN_PERIOD_S, max_p)
        return {"top": top, "compute_s": time.perf_counter() - t0, "compute_cpu_s": time.process_time() - c0,
                "buckets": int(wide.notna().sum().sum()),
                "total": float(wide.sum().sum()), "counters": int(wide.shape[1])}

    return fx.profile_call(run, profile)


CHILDREN = {
    "ours-one": child_ours_one,
    "ours-one-again": lambda job, prof: child_ours_one(job, prof, again=INNER_REPEAT),
    "ours-one-again-1t": lambda job, prof: child_ours_one(job, prof, again=INNER_REPEAT),
    "plain-one": child_plain_one,
    "ours-glob": lambda job, prof: child_ours_glob(job, prof, full=False),
    "ours-glob-1t": lambda job, prof: child_ours_glob(job, prof, full=False),
    "ours-glob-b64": lambda job, prof: child_ours_glob(job, prof, full=False, size=SMALL_BLOCK),
    "ours-glob-full": lambda job, prof: child_ours_glob(job, prof, full=True),
    "ours-each": child_ours_each,
    "plain-glob": child_plain_glob,
}


def _import_libraries(name: str) -> None:
    """Import what the child needs before its work is timed (wall still includes it): the first
    import of scipy.signal or pyarrow.parquet alone takes most of a second."""
    import numpy  # noqa: F401
    import pandas  # noqa: F401
    import pyarrow.parquet  # noqa: F401
    import scipy.signal  # noqa: F401

    if name.startswith("ours"):
        import warehouse.home  # noqa: F401
        import warehouse.patterns  # noqa: F401
        import warehouse.series  # noqa: F401
        import warehouse.stats.patterns  # noqa: F401


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    _import_libraries(args.child)
    t0 = job["t0"] = time.perf_counter()
    info = CHILDREN[args.child](job, args.profile)
    info["work_s"] = time.perf_counter() - t0
    Path(args.result).write_text(json.dumps(info))


# -- parent --------------------------------------------------------------------------------------

def near(a: float, b: float) -> bool:
    return abs(a - b) <= TOLERANCE * b


def label(seconds: float) -> str:
    from warehouse.stats.patterns import period_label

    return period_label(seconds)


def fleet_score(periods: dict[str, list], plants: dict[str, dict]) -> dict[str, object]:
    """How many planted periods were found within 2%, and which other periods were reported."""
    hit, missed, extra = [], [], []
    for key, found in periods.items():
        secs = [p[0] for p in found]
        plant = plants.get(key)
        if plant:
            (hit if any(near(s, plant["seconds"]) for s in secs) else missed).append(key)
        for s in secs:
            if not (near(s, DAY) or (plant and near(s, plant["seconds"]))):
                extra.append((key, s))
    daily = sum(any(near(p[0], DAY) for p in found) for found in periods.values())
    return {"hit": hit, "missed": missed, "extra": extra, "daily": daily}


def note_for(name: str, r: fx.Measured, job: dict) -> str:
    i = r.info
    if name == "ours-one":
        found = [p[0] for p in i["periods"]]
        return (f"periods {', '.join(label(s) for s in found) or 'none'}; {i['episodes']} episodes"
                f"{' (clustered)' if i['clustered'] else ''}; {len(i['change_points'])} level shift(s)")
    if name.startswith("ours-one-again"):
        again = sorted(i["compute_again_s"])
        return (f"compute: median of {len(again)} repeats (best {again[0]:.3f}, worst {again[-1]:.3f});"
                f" its first call {i['compute_s']:.3f}")
    if name == "plain-one":
        return f"top peak {label(i['top'])}; top under 1 h {label(i['top_under_1h'])}"
    plants = job["plants"]
    if name.startswith("ours-glob") or name == "ours-each":
        sc = fleet_score(i["periods"], plants)
        short = sum(s <= DAY for _, s in sc["extra"])
        text = (f"planted found {len(sc['hit'])}/{len(plants)}; 1 day in {sc['daily']}/{len(i['periods'])};"
                f" other: {short} <= 1 day, {len(sc['extra']) - short} longer")
        if "blocks" in i:
            text += f"; {len(i['blocks'])} blocks"
        return text
    if name == "plain-glob":
        keys = job["glob_keys"]
        tops = {keys[c]: s for c, s in i["top"].items()}
        hit = sum(near(tops[k], p["seconds"]) for k, p in plants.items() if k in tops)
        daily = sum(near(s, DAY) for s in tops.values())
        return f"top peak = planted in {hit}/{len(plants)}; = 1 day in {daily}/{len(tops)}"
    return ""


def report(job: dict, runs: dict[str, fx.Measured]) -> None:
    print()
    print(f"data: {job['points']:,} points in {job['files_n']} Parquet files; one counter {job['solo_key']}"
          f" ({job['solo_rows']:,} one-minute buckets, planted {label(job['period_s'])});"
          f" glob {job['glob']!r}: {len(job['glob_ids'])} counters x {job['fleet_rows']:,} buckets,"
          f" {len(job['plants'])} with a planted period")
    head = (f"{'alternative':<18} {'wall s':>7} {'work s':>7} {'compute s':>9} {'(cpu)':>7} {'cpu s':>7}"
            f" {'peak MiB':>8}"
            f" {'load':>5}  {'wall x':>7} {'peak x':>7}  result")
    print(head)
    print("-" * (len(head) + 60))
    for name in ALTERNATIVES:
        r = runs.get(name)
        if r is None:
            continue
        if r.error:
            print(f"{name:<18} failed: {r.error}")
            continue
        base = runs.get(BASE.get(name, ""))
        wx = f"{fx.ratio(r.wall, base.wall):.2f}" if base and not base.error else ""
        px = f"{fx.ratio(r.peak_mib, base.peak_mib):.2f}" if base and not base.error else ""
        compute = float(r.info.get("compute_s", math.nan))
        compute_cpu = float(r.info.get("compute_cpu_s", math.nan))
        if name.startswith("ours-one-again"):
            again = sorted(r.info["compute_again_s"])
            compute, compute_cpu = again[len(again) // 2], math.nan
        print(f"{name:<18} {r.wall:7.2f} {fx.fmt(r.work):>7} {fx.fmt(compute, '.3f'):>9}"
              f" {fx.fmt(compute_cpu, '.3f'):>7}"
              f" {r.cpu:7.2f}"
              f" {r.peak_mib:8.0f} {r.load:5.2f}  {wx:>7} {px:>7}  {note_for(name, r, job)}")
    print("wall: the whole child (start-up, imports, work); work: inside the child after imports; compute: the")
    print("  analysis alone (ours-one: find_periods + episodes + change_points; ours-glob*: the per-column loop;")
    print("  plain: periodogram + top peak); (cpu): the process CPU seconds of that compute, less sensitive to the")
    print("  load; cpu s: user + system s of the whole child (all threads); peak: its max RSS;")
    print("  load: 1-min load average at its start (2 shared cores); wall x / peak x: this row over its baseline")
    print(f"  ({', '.join(f'{k} over {v}' for k, v in BASE.items())}).")

    one = runs.get("ours-one")
    if one and not one.error:
        parts = one.info["parts"]
        print()
        i = one.info
        print(f"ours-one: open_warehouse {i['open_s']:.3f} s, find_patterns {i['find_patterns_s']:.3f} s; inside it: "
              + ", ".join(f"{k} {v:.3f}" for k, v in parts.items())
              + f", other {i['find_patterns_s'] - sum(parts.values()):.3f}")
        print("  periods found: " + "; ".join(f"{label(sec)} = {sec:.0f} s (strength {st:.3f}, p {p:.1e})"
                                              for sec, st, p in i["periods"]))
    for name in ("ours-glob", "ours-glob-1t", "ours-glob-b64", "ours-glob-full"):
        g = runs.get(name)
        if g and not g.error:
            i = g.info
            n = i["counters"]
            print(f"{name}: read {i['read_s']:.2f} s in {len(i['blocks'])} blocks of <= {i['block_counters']} counters"
                  f" ({i['block_counters'] * i['grid_n'] * 8 / 2**20:.0f} MiB of float64 each);"
                  f" compute {i['compute_s']:.2f} s = {1000 * i['compute_s'] / n:.1f} ms per counter")

    print()
    print("same data (buckets with a value, and their sum):")
    for a, b in (("ours-one", "plain-one"), ("ours-glob", "plain-glob")):
        ra, rb = runs.get(a), runs.get(b)
        if ra and rb and not ra.error and not rb.error:
            same = ra.info["buckets"] == rb.info["buckets"] and \
                math.isclose(ra.info["total"], rb.info["total"], rel_tol=1e-12)
            print(f"  {a} {ra.info['buckets']:,} / {ra.info['total']:.6g}; {b} {rb.info['buckets']:,} /"
                  f" {rb.info['total']:.6g}")
            fx.goal(f"{a} and {b} see the same buckets", same)

    print()
    print("checks and goals:")
    if one and not one.error:
        found = [p[0] for p in one.info["periods"]]
        best = min(found, key=lambda s: abs(s - job["period_s"]), default=math.nan)
        fx.goal(f"ours-one finds the planted {label(job['period_s'])} within 2%: nearest {best:.1f} s"
                f" ({100 * (best / job['period_s'] - 1):+.2f}%)", bool(found) and near(best, job["period_s"]))
        rep_run = runs.get("ours-one-again")
        again = rep_run.info["compute_again_s"] if rep_run and not rep_run.error else []
        fastest = min(again) if again else math.nan
        first = one.info["compute_s"]
        fx.goal(f"ours-one compute well under a second (< 0.5 s), judged on the best repeat:"
                f" {fx.fmt(fastest, '.3f')} s;"
                f" ours-one's own call {first:.3f} s wall, {one.info['compute_cpu_s']:.3f} s cpu;"
                f" find_patterns as a whole {one.info['find_patterns_s']:.3f} s, the whole child {one.wall:.2f} s",
                None if not again else fastest < 0.5)
        for name in ("ours-one-again", "ours-one-again-1t"):
            rr = runs.get(name)
            if rr and not rr.error:
                a = sorted(rr.info["compute_again_s"])
                print(f"    {name}, {len(a)} repeats after a first call of {rr.info['compute_s']:.3f} s:"
                      f" best {a[0]:.3f} s, median {a[len(a) // 2]:.3f} s, worst {a[-1]:.3f} s")
    plain = runs.get("plain-one")
    if plain and not plain.error:
        top = plain.info["top"]
        print(f"  [info] plain-one top peak {top:.0f} s ({label(top)}): the planted period"
              f" {'is' if near(top, job['period_s']) else 'is not'} the top peak; under 1 h it is"
              f" {plain.info['top_under_1h']:.1f} s")
    for name in ("ours-glob", "ours-glob-1t", "ours-glob-b64", "ours-glob-full", "ours-each"):
        g = runs.get(name)
        if g and not g.error:
            sc = fleet_score(g.info["periods"], job["plants"])
            fx.goal(f"{name} finds every planted fleet period within 2%: {len(sc['hit'])}/{len(job['plants'])}"
                    + (f"; missed {', '.join(sc['missed'])}" if sc["missed"] else ""), not sc["missed"])
            if sc["extra"]:
                shown = ", ".join(f"{k} {label(s)}" for k, s in sc["extra"][:8])
                print(f"    periods neither 1 day nor planted ({len(sc['extra'])}): {shown}"
                      f"{' ...' if len(sc['extra']) > 8 else ''}")
    if any(n.startswith("ours-glob") or n == "ours-each" for n in runs):
        print("    (the fleet's weekday/weekend swing is a weekly rhythm that the fleet's range cannot test, as a"
              " period must repeat 3 times; its traces at 2-5 days are not planted but not wholly false either)")
    og, pg = runs.get("ours-glob"), runs.get("plain-glob")
    if og and pg and not og.error and not pg.error:
        fx.goal(f"{len(job['glob_ids'])} counters streamed: ours-glob peak {og.peak_mib:.0f} MiB vs plain-glob"
                f" {pg.peak_mib:.0f} MiB ({fx.ratio(og.peak_mib, pg.peak_mib):.2f}x)", og.peak_mib < pg.peak_mib)
        fx.goal(f"ours-glob no slower than the plain loop: {og.wall:.2f} s vs {pg.wall:.2f} s wall",
                og.wall <= pg.wall)


def run_with_env(name: str, cmd: list[str], result: Path, blas_threads: int | None) -> fx.Measured:
    """fx.run_child with this alternative's environment (the child inherits ours)."""
    env = dict(CHILD_ENV.get(name, {}))
    if blas_threads is not None:
        env.setdefault("OPENBLAS_NUM_THREADS", str(blas_threads))
    saved = {k: os.environ.get(k) for k in env}
    os.environ.update(env)
    try:
        return fx.run_child(name, cmd, result)
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="fleet of 10 hosts x 10 counters x 7 days")
    ap.add_argument("--only", default=",".join(ALTERNATIVES), help=f"subset of {', '.join(ALTERNATIVES)}")
    ap.add_argument("--skip", default="", help="alternatives to leave out")
    ap.add_argument("--repeat", type=int, default=1, help="runs per alternative; the fastest wall is shown")
    ap.add_argument("--profile", type=Path, help="folder for a cProfile dump of each child (NAME.prof)")
    ap.add_argument("--blas-threads", type=int, help="set OPENBLAS_NUM_THREADS for every child (default: as inherited)")
    fx.child_options(ap, CHILDREN)
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        child_main(args)
        return
    names = fx.pick(args.only, ALTERNATIVES)
    skip = set(fx.pick(args.skip, ALTERNATIVES))
    print(fx.machine_note())
    print(fx.code_note())
    print(f"OPENBLAS_NUM_THREADS: {os.environ.get('OPENBLAS_NUM_THREADS', 'unset')} (children inherit it"
          + (f"; --blas-threads {args.blas_threads})" if args.blas_threads is not None else ")"))
    out = args.out.resolve()
    plan = quick_plan() if args.quick else full_plan()
    home = ensure(plan, out)
    facts = fx.catalog_facts(home, {"solo": plan.solo_key, "glob": FLEET_GLOB})
    stamp = json.loads((home / "fixture.json").read_text())
    work = Path(tempfile.mkdtemp(prefix="patterns-", dir=out))
    job = {"home": str(home), "files": facts["files"], "solo_key": plan.solo_key, "solo_id": facts["ids"]["solo"][0],
           "glob": FLEET_GLOB, "glob_ids": facts["ids"]["glob"],
           "glob_keys": {str(i): facts["keys"][i] for i in facts["ids"]["glob"]},
           "plants": planted(plan), "period_s": plan.period_s, "solo_rows": plan.solo_rows,
           "fleet_rows": plan.fleet_rows, "points": stamp["points"], "files_n": len(facts["files"])}
    job_path = work / "job.json"
    job_path.write_text(json.dumps(job))
    if args.profile:
        args.profile.mkdir(parents=True, exist_ok=True)
    fx.warm(facts["files"])
    runs: dict[str, fx.Measured] = {}
    for name in ALTERNATIVES:
        if name not in names or name in skip:
            continue
        for i in range(max(1, args.repeat)):
            print(f"running {name}" + (f" ({i + 1}/{args.repeat})" if args.repeat > 1 else ""), flush=True)
            cmd = fx.child_command(SCRIPT, name, job_path, work / f"{name}.json")
            if args.profile:
                cmd += ["--profile", str(args.profile.resolve() / f"{name}.prof")]
            run = run_with_env(name, cmd, work / f"{name}.json", args.blas_threads)
            print(f"  {run.wall:.2f} s wall, {fx.fmt(run.work)} s work, {run.cpu:.2f} s cpu,"
                  f" peak {run.peak_mib:.0f} MiB,"
                  f" load {run.load:.2f} {run.error}", flush=True)
            best = runs.get(name)
            if best is None or (not run.error and (best.error or run.wall < best.wall)):
                if best is not None:
                    run.peak_mib = max(run.peak_mib, best.peak_mib)
                runs[name] = run
            else:
                best.peak_mib = max(best.peak_mib, run.peak_mib)
    report(job, runs)
    shutil.rmtree(work, ignore_errors=True)
    print()
    print(fx.machine_note())


if __name__ == "__main__":
    main()
