"""Ingest benchmark: our loader against three other ways of turning a wide CSV into long Parquet.

Usage (from the project root, in the venv):

    python bench/ingest.py              # 2,000 counters x 1 week at 15 s (~80 M values, ~420 MB)
    python bench/ingest.py --quick      # about a tenth of that
    python bench/ingest.py --only ours,arrow --repeat 3 --wait-idle 120
    python bench/ingest.py --only ours --profile bench/out/ours.prof

The input file is generated once into the work folder (default bench/out/) and reused while its
parameters stay the same. Every alternative runs in its own child process, so the wall time
includes interpreter start-up and imports, and the peak memory is that child's own maximum
resident set size (from os.wait4). The alternatives:

    ours    `warehouse --home <tmp> init`, then ingest_files() in a child: parse, long rows,
            sorted day-partitioned Parquet, catalog commit
    (a)     pyarrow.csv.read_csv with 64 MiB blocks: parsing alone, the floor
    (b)     DuckDB: COPY (UNPIVOT (FROM read_csv(...)) ...) TO parquet
    (c)     pandas: read_csv, melt, drop the empty cells, to_parquet

Timings on a shared machine are only as good as its quietness: the `others` column shows how
much CPU other processes took during each shown run.

This is a measuring tool, not a test: nothing here asserts; the goals are printed as met or not.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402

HERE = Path(__file__).resolve().parent
GENERATOR_VERSION = 1
CHUNK_ROWS = 2048
START = "2026-03-02T00:00:00"
EMPTY_SHARE = 2e-4          # share of cells left empty
TIME_HEADER = "timestamp"

# (metric suffix, baseline, daily swing, noise, lower bound, upper bound, decimals)
# decimals 0 means the column is written as whole numbers.
METRICS = (
    ("cpu_busy_pct", 35.0, 25.0, 6.0, 0.0, 100.0, 2),
    ("cpu_ready_ms", 40.0, 20.0, 12.0, 0.0, math.inf, 2),
    ("mem_used_mb", 12_000.0, 3_000.0, 400.0, 0.0, math.inf, 0),
    ("mem_free_pct", 40.0, 12.0, 3.0, 0.0, 100.0, 2),
    ("disk_read_kb_per_sec", 4_000.0, 2_500.0, 900.0, 0.0, math.inf, 0),
    ("disk_latency_ms", 4.0, 2.5, 1.5, 0.05, math.inf, 3),
    ("net_in_kbit_per_sec", 30_000.0, 20_000.0, 8_000.0, 0.0, math.inf, 0),
    ("net_out_kbit_per_sec", 20_000.0, 15_000.0, 6_000.0, 0.0, math.inf, 0),
    ("run_queue", 3.0, 2.0, 1.5, 0.0, math.inf, 0),
    ("swap_used_pct", 3.0, 1.0, 0.8, 0.0, 100.0, 2),
)

ALTERNATIVES = ("ours", "arrow", "duckdb", "pandas")
LABELS = {
    "ours": "ours (init + ingest)",
    "arrow": "(a) pyarrow read_csv",
    "duckdb": "(b) duckdb unpivot",
    "pandas": "(c) pandas melt",
}


# -- input file --------------------------------------------------------------------------------

@dataclass(frozen=True)
class Params:
    counters: int
    days: float
    interval: int
    seed: int

    @property
    def rows(self) -> int:
        return int(round(self.days * 86_400 / self.interval))

    def file_name(self) -> str:
        return f"wide-{self.counters}c-{self.days:g}d-{self.interval}s-seed{self.seed}.csv"

    def as_dict(self) -> dict[str, object]:
        return {"counters": self.counters, "days": self.days, "interval": self.interval,
                "seed": self.seed, "rows": self.rows, "version": GENERATOR_VERSION}


def counter_headers(counters: int) -> list[str]:
    hosts = -(-counters // len(METRICS))
    width = max(3, len(str(hosts)))
    names = [f"srv{h + 1:0{width}d}.{m[0]}" for h in range(hosts) for m in METRICS]
    return names[:counters]


def generate(path: Path, params: Params) -> dict[str, object]:
    """Write the wide CSV chunk by chunk; returns the metadata stored next to it."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pacsv

    rng = np.random.default_rng(params.seed)
    n = params.counters
    kind = np.arange(n) % len(METRICS)
    spec = np.array([m[1:6] for m in METRICS], dtype=np.float64)[kind]     # (n, 5)
    scale = rng.uniform(0.6, 1.4, n)
    base, swing, noise = spec[:, 0] * scale, spec[:, 1] * scale, spec[:, 2] * scale
    low, high = spec[:, 3:4], spec[:, 4:5]
    phase = rng.uniform(-0.6, 0.6, n)[:, None]
    decimals = np.array([m[6] for m in METRICS])[kind]
    groups = {int(d): np.flatnonzero(decimals == d) for d in np.unique(decimals)}
    headers = counter_headers(n)
    start = np.datetime64(START, "s")

    tmp = path.with_name(path.name + ".part")
    values = 0
    t0 = time.perf_counter()
    with open(tmp, "wb") as fh:
        fh.write((",".join([TIME_HEADER] + headers) + "\n").encode())
        writer_opts = pacsv.WriteOptions(include_header=False, quoting_style="none", batch_size=CHUNK_ROWS)
        for first in range(0, params.rows, CHUNK_ROWS):
            rows = min(CHUNK_ROWS, params.rows - first)
            secs = (first + np.arange(rows)) * params.interval
            day = 2 * np.pi * secs / 86_400.0
            # A daily cycle per counter with its own phase, plus independent noise.
            grid = base[:, None] + swing[:, None] * np.sin(day[None, :] + phase)
            grid += noise[:, None] * rng.standard_normal((n, rows))
            np.clip(grid, low, high, out=grid)
            empty = rng.random((n, rows)) < EMPTY_SHARE
            values += int(empty.size - empty.sum())
            stamps = np.datetime_as_string(start + secs.astype("timedelta64[s]"), unit="s")
            cols: list[pa.Array] = [pa.array(np.char.add(stamps, "Z"), pa.string())]
            arrays: list[pa.Array | None] = [None] * n
            for d, idx in groups.items():
                block = np.round(grid[idx], d)
                for k, j in enumerate(idx):
                    if d == 0:
                        arrays[j] = pa.array(block[k].astype(np.int64), pa.int64(), mask=empty[j])
                    else:
                        arrays[j] = pa.array(block[k], pa.float64(), mask=empty[j])
            cols.extend(arrays)  # type: ignore[arg-type]
            table = pa.Table.from_arrays(cols, names=[TIME_HEADER] + headers)
            pacsv.write_csv(table, fh, write_options=writer_opts)
    os.replace(tmp, path)
    meta = params.as_dict() | {"bytes": path.stat().st_size, "values": values,
                                "cells": n * params.rows, "seconds": round(time.perf_counter() - t0, 1)}
    path.with_suffix(".json").write_text(json.dumps(meta, indent=1))
    return meta


def ensure_input(out: Path, params: Params) -> tuple[Path, dict[str, object]]:
    out.mkdir(parents=True, exist_ok=True)
    path = out / params.file_name()
    meta_path = path.with_suffix(".json")
    if path.exists() and meta_path.exists():
        meta = json.loads(meta_path.read_text())
        if {k: meta.get(k) for k in params.as_dict()} == params.as_dict() and meta.get("bytes") == path.stat().st_size:
            print(f"reusing {path} ({meta['bytes'] / 1e6:.0f} MB)", flush=True)
            return path, meta
    print(f"generating {path}: {params.rows:,} rows x {params.counters:,} counters ...", flush=True)
    meta = generate(path, params)
    print(f"  {meta['bytes'] / 1e6:.0f} MB, {meta['values']:,} values in {meta['seconds']} s", flush=True)
    return path, meta


def warm_cache(path: Path) -> None:
    """Read the file once so every alternative starts from the page cache."""
    with open(path, "rb") as fh:
        while fh.read(64 << 20):
            pass


# -- children: one alternative each --------------------------------------------------------------

def child_ours(csv: Path, work: Path, profile: str | None) -> dict[str, object]:
    from warehouse.ingest.run import IngestOptions, ingest_files

    home = work / "home"
    if profile:
        import cProfile
        prof = cProfile.Profile()
        results = prof.runcall(ingest_files, home, [csv], IngestOptions())
        prof.dump_stats(profile)
    else:
        results = ingest_files(home, [csv], IngestOptions())
    (result,) = results
    if result.status != "loaded":
        raise SystemExit(f"ingest did not load: {result.status}: {result.message}")
    return {"values": result.values_loaded, "rows": result.rows_loaded,
            "quarantined": result.cells_quarantined + result.rows_quarantined,
            "out_bytes": _tree_bytes(home / "points")}


def child_arrow(csv: Path, work: Path, profile: str | None) -> dict[str, object]:
    import pyarrow.csv as pacsv

    table = pacsv.read_csv(csv, read_options=pacsv.ReadOptions(block_size=64 << 20))
    return {"values": table.num_rows * (table.num_columns - 1), "rows": table.num_rows, "out_bytes": 0}


def child_duckdb(csv: Path, work: Path, profile: str | None) -> dict[str, object]:
    import duckdb

    target = work / "duckdb.parquet"
    con = duckdb.connect()
    src = str(csv).replace("'", "''")
    dst = str(target).replace("'", "''")
    con.execute(f"""
        COPY (UNPIVOT (FROM read_csv('{src}')) ON COLUMNS(* EXCLUDE "{TIME_HEADER}")
              INTO NAME counter VALUE value)
        TO '{dst}' (FORMAT parquet)""")
    values = con.execute(f"SELECT count(*) FROM read_parquet('{dst}')").fetchone()[0]
    con.close()
    return {"values": int(values), "out_bytes": target.stat().st_size}


def child_pandas(csv: Path, work: Path, profile: str | None) -> dict[str, object]:
    import pandas as pd

    target = work / "pandas.parquet"
    wide = pd.read_csv(csv, parse_dates=[TIME_HEADER])
    long = wide.melt(id_vars=[TIME_HEADER], var_name="counter", value_name="value")
    del wide
    long = long.dropna(subset=["value"])   # the same rows as the others keep: no empty cells
    long.to_parquet(target, index=False)
    return {"values": len(long), "out_bytes": target.stat().st_size}


CHILDREN = {"ours": child_ours, "arrow": child_arrow, "duckdb": child_duckdb, "pandas": child_pandas}


def _tree_bytes(root: Path) -> int:
    return sum(p.stat().st_size for p in root.rglob("*.parquet"))


def child_main(args: argparse.Namespace) -> None:
    t0 = time.perf_counter()
    info = CHILDREN[args.child](Path(args.csv), Path(args.work), args.profile)
    info["work_s"] = time.perf_counter() - t0
    Path(args.result).write_text(json.dumps(info))


# -- parent: run and compare ---------------------------------------------------------------------

@dataclass
class Run:
    name: str
    wall: float
    peak_kib: int
    cpu: float          # user + system seconds of the child process(es)
    others: float       # CPU seconds used meanwhile by everything else on the machine
    info: dict[str, object]


def busy_seconds() -> float:
    """CPU seconds spent busy by the whole machine since boot (all CPUs), from /proc/stat."""
    try:
        with open("/proc/stat") as fh:
            ticks = [int(x) for x in fh.readline().split()[1:]]
    except OSError:
        return 0.0
    return (sum(ticks) - ticks[3] - ticks[4]) / os.sysconf("SC_CLK_TCK")   # minus idle and iowait


def wait_until_idle(limit: float) -> None:
    """Wait (at most `limit` seconds) for a second in which other processes use under 5% CPU."""
    deadline = time.monotonic() + limit
    said = False
    while time.monotonic() < deadline:
        b0 = busy_seconds()
        time.sleep(1.0)
        if busy_seconds() - b0 < 0.05 * (os.cpu_count() or 1):
            return
        if not said:
            print("  waiting for other processes to go quiet ...", flush=True)
            said = True


def run_process(cmd: list[str], quiet: bool = False) -> tuple[float, int, float, float]:
    """Wall seconds, peak RSS (KiB), CPU seconds, and other processes' CPU seconds of one child."""
    b0 = busy_seconds()
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL if quiet else None)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    cpu = usage.ru_utime + usage.ru_stime
    others = max(0.0, busy_seconds() - b0 - cpu)
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"failed ({proc.returncode}): {' '.join(cmd)}")
    return wall, usage.ru_maxrss, cpu, others


def warehouse_command() -> list[str]:
    script = Path(sys.executable).with_name("warehouse")
    if script.exists():
        return [str(script)]
    found = shutil.which("warehouse")
    if not found:
        raise SystemExit("the `warehouse` command is not installed in this environment")
    return [found]


def run_one(name: str, csv: Path, out: Path, profile: str | None, keep: bool) -> Run:
    work = Path(tempfile.mkdtemp(prefix=f"run-{name}-", dir=out))
    result = work / "result.json"
    wall, peak, cpu, others = 0.0, 0, 0.0, 0.0
    try:
        cmds = []
        if name == "ours":
            cmds.append(warehouse_command() + ["--home", str(work / "home"), "--quiet", "init"])
        cmd = [sys.executable, str(Path(__file__).resolve()), "--child", name, "--csv", str(csv),
               "--work", str(work), "--result", str(result)]
        if profile and name == "ours":
            cmd += ["--profile", profile]
        cmds.append(cmd)
        for c in cmds:
            w, p, u, o = run_process(c, quiet=c is not cmd)
            wall, peak, cpu, others = wall + w, max(peak, p), cpu + u, others + o
        info = json.loads(result.read_text())
    finally:
        if not keep:
            shutil.rmtree(work, ignore_errors=True)
    return Run(name, wall, peak, cpu, others, info)


def report(runs: dict[str, Run], meta: dict[str, object]) -> None:
    size = int(meta["bytes"])  # type: ignore[arg-type]
    values = int(meta["values"])  # type: ignore[arg-type]
    base = runs.get("arrow")
    ours = runs.get("ours")
    print()
    print(f"input: {meta['rows']:,} rows x {meta['counters']:,} counters, {size / 1e6:.0f} MB, "
          f"{values:,} values ({int(meta['cells']) - values:,} empty cells)")  # type: ignore[arg-type]
    head = (f"{'alternative':<22} {'wall s':>7} {'work s':>7} {'cpu s':>6} {'MB/s':>7} {'Mval/s':>7} "
            f"{'peak MiB':>9} {'out MiB':>8} {'vs (a)':>7} {'vs ours':>8} {'others':>7}")
    print(head)
    print("-" * len(head))
    for name in ALTERNATIVES:
        r = runs.get(name)
        if r is None:
            continue
        vs_a = f"{r.wall / base.wall:.2f}x" if base else "-"
        vs_o = f"{r.wall / ours.wall:.2f}x" if ours else "-"
        out_mib = int(r.info.get("out_bytes", 0)) / 2**20  # type: ignore[call-overload]
        print(f"{LABELS[name]:<22} {r.wall:7.2f} {float(r.info['work_s']):7.2f} {r.cpu:6.1f} "  # type: ignore[arg-type]
              f"{size / 1e6 / r.wall:7.1f} {values / 1e6 / r.wall:7.2f} {r.peak_kib / 1024:9.0f} "
              f"{(f'{out_mib:.0f}' if out_mib else '-'):>8} {vs_a:>7} {vs_o:>8} {_others(r):>6.0f}%")
    print("wall s: whole child process(es), start-up and imports included; work s: inside the child only;")
    print("cpu s: user + system time of the child(ren); vs (a), vs ours: wall time ratio (above 1 = slower);")
    print(f"others: CPU used meanwhile by other processes, in % of the machine's {os.cpu_count()} CPUs.")
    if any(_others(r) > 10 for r in runs.values()):
        print("WARNING: other processes were busy during some runs; their times are inflated "
              "(try --repeat 3 --wait-idle 120).")
    for name, r in runs.items():
        got = r.info.get("values")
        if name != "arrow" and got != values:
            print(f"NOTE: {LABELS[name]} wrote {got:,} values, expected {values:,}")
    if not ours:
        return
    print()
    print("goals:")
    mbps = size / 1e6 / ours.wall
    if base:
        ratio = ours.wall / base.wall
        _goal(f"ours within 2.5x of (a) end to end: {ratio:.2f}x", ratio <= 2.5)
    _goal(f"ours >= 60 MB/s: {mbps:.1f} MB/s", mbps >= 60)
    for name in ("duckdb", "pandas"):
        if name in runs:
            speedup = runs[name].wall / ours.wall
            _goal(f"ours >= 2x faster than {LABELS[name]}: {speedup:.2f}x", speedup >= 2)
    _goal(f"ours peak memory < 1 GiB: {ours.peak_kib / 1024:.0f} MiB", ours.peak_kib < 1 << 20)


def _others(r: Run) -> float:
    return 100.0 * r.others / max(r.wall * (os.cpu_count() or 1), 1e-9)


def _goal(text: str, met: bool) -> None:
    print(f"  [{'met' if met else 'MISSED'}] {text}")


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--counters", type=int, default=2000, help="counter columns (default 2000)")
    ap.add_argument("--days", type=float, default=7.0, help="days of samples (default 7)")
    ap.add_argument("--interval", type=int, default=15, help="seconds between samples (default 15)")
    ap.add_argument("--seed", type=int, default=7, help="random seed of the generated values")
    ap.add_argument("--out", type=Path, default=HERE / "out", help="work folder (default bench/out)")
    ap.add_argument("--quick", action="store_true", help="about a tenth of the default size (0.7 days)")
    ap.add_argument("--only", default=",".join(ALTERNATIVES),
                    help=f"comma-separated subset of {', '.join(ALTERNATIVES)}")
    ap.add_argument("--repeat", type=int, default=1,
                    help="rounds over the alternatives; each one's fastest run is shown")
    ap.add_argument("--wait-idle", type=float, default=0, metavar="SECONDS",
                    help="before each run, wait up to this long for other processes to go quiet")
    ap.add_argument("--profile", help="write a cProfile dump (main thread) of our ingest child to this path")
    ap.add_argument("--keep", action="store_true", help="keep each run's output folder")
    ap.add_argument("--generate-only", action="store_true", help="make the input file and stop")
    # internal: run one alternative in this process
    ap.add_argument("--child", choices=ALTERNATIVES, help=argparse.SUPPRESS)
    ap.add_argument("--csv", help=argparse.SUPPRESS)
    ap.add_argument("--work", help=argparse.SUPPRESS)
    ap.add_argument("--result", help=argparse.SUPPRESS)
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        child_main(args)
        return
    days = 0.7 if args.quick and args.days == 7.0 else args.days
    params = Params(args.counters, days, args.interval, args.seed)
    out = args.out.resolve()
    csv, meta = ensure_input(out, params)
    if args.generate_only:
        return
    names = fx.pick(args.only, ALTERNATIVES)
    warm_cache(csv)
    runs: dict[str, Run] = {}
    rounds = max(1, args.repeat)
    for i in range(rounds):     # rounds rather than one alternative after another: drift hits all alike
        for name in [n for n in ALTERNATIVES if n in names]:
            if args.wait_idle:
                wait_until_idle(args.wait_idle)
            print(f"running {LABELS[name]}" + (f" (round {i + 1}/{rounds})" if rounds > 1 else ""), flush=True)
            run = run_one(name, csv, out, args.profile, args.keep)
            print(f"  {run.wall:.2f} s, cpu {run.cpu:.1f} s, peak {run.peak_kib / 1024:.0f} MiB, "
                  f"others {_others(run):.0f}%", flush=True)
            best = runs.get(name)
            if best is None or run.wall < best.wall:
                run.peak_kib = max(run.peak_kib, best.peak_kib if best else 0)
                runs[name] = run
            else:
                best.peak_kib = max(best.peak_kib, run.peak_kib)
    report(runs, meta)


if __name__ == "__main__":
    main()
