"""Scale benchmark: one operating system's full counter set for a month, written as a collector
writes it (one wide CSV per day), loaded and queried on this machine.

Usage (from the project root, in the venv):

    python bench/scale.py                   # 16,000 counters x 30 days x 15 s: 2.76 billion values
    python bench/scale.py --scale 0.01      # 160 counters x 30 days: a few minutes, for quick checks
    python bench/scale.py --scale 0.01 --profile ingest     # also: where the ingest's time goes
                                            # (py-spy over every thread when on PATH, else cProfile)
    python bench/scale.py --only correlate,pairs --keep     # reuse the warehouse of an earlier --keep run

The full run writes ~15 GB of CSV and ~11 GB of Parquet under bench/out/ (it checks the free space
first and falls back to generating and loading one day at a time when the CSV of the whole month
would not fit beside the warehouse); it takes about an hour, most of it generating the CSV.

Data (invented, bench/warehouse_fixture.py's generator): one host's counters in six families
(disk IOPS and latency, per-process CPU and working set, NIC in/out), a daily rhythm damped at
weekends plus noise, and a shared burst process planted in disk000_latency_ms (the symptom),
proc0003_cpu_pct (at the same time) and nic002_in_kbps (three minutes earlier).

Steps, each in its own child process (wall: the whole child, start-up included; peak: its own
maximum resident set size), with the issue's goals:
  ingest     `warehouse ingest day-*.csv` of the whole month        goal < 15 min, peak < 1 GiB
  correlate  `correlate TARGET --bucket 1m --max-lag 10` (Spearman) against every other counter
                                                                     goal < 60 s
  pairs      `correlate --pairs --top 100 --bucket 1m`              goal < 10 min
  blas       the same Gram product X.T @ X of the 1-minute matrix in plain numpy (timed on one block
             of at most 1,000 columns, extrapolated by the square of the column ratio): the floor
  rollup     `rollup --all` (weeks)                                  goal < 5 min
  size       `size '<500 counters>' --combine sum`                   no goal: reported

This is a measuring tool, not a test: nothing here asserts; goals are printed as met or MISSED.
"""
from __future__ import annotations

import argparse
import json
import math
import shutil
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402

SCRIPT = Path(__file__).resolve()
STEPS = ("ingest", "correlate", "pairs", "blas", "rollup", "size")
DAY_ROWS = 86_400 // 15
# Bytes per value, measured on the 28-day bench fixture (1.69 GB of CSV and 1.24 GB of Parquet for
# 322.6 M values), with a margin: what the free-space check plans for.
CSV_BYTES_PER_VALUE = 5.6
PARQUET_BYTES_PER_VALUE = 4.2
SPARE_BYTES = 2 << 30
GOALS = {"ingest": 15 * 60, "correlate": 60, "pairs": 10 * 60, "rollup": 5 * 60}
PEAK_GOAL_MIB = 1024
SIZE_COUNTERS = 500


def families(scale: float) -> tuple[fx.Family, ...]:
    """16,000 counters at scale 1, in the proportions of a server's counter set."""
    def n(full: int) -> int:
        return max(1, round(full * scale))
    return (
        fx.Family("disk{:04d}_iops", n(2000), 300.0, 200.0, 60.0),
        fx.Family("disk{:04d}_latency_ms", n(2000), 3.0, 1.5, 0.8, 0.125, math.inf, 3),
        fx.Family("proc{:04d}_cpu_pct", n(6000), 4.0, 3.0, 1.5, 0.0, 100.0, 2),
        fx.Family("proc{:04d}_working_set_mb", n(4000), 300.0, 80.0, 20.0),
        fx.Family("nic{:04d}_in_kbps", n(1000), 30_000.0, 20_000.0, 8_000.0),
        fx.Family("nic{:04d}_out_kbps", n(1000), 20_000.0, 15_000.0, 6_000.0),
    )


def spec_for(scale: float, days: int) -> fx.Spec:
    fams = families(scale)
    leader = "nic0002_in_kbps" if fams[4].count > 2 else "nic0000_in_kbps"
    partner = "proc0003_cpu_pct" if fams[2].count > 3 else "proc0000_cpu_pct"
    return fx.Spec(f"scale{scale:g}", 1, fams, float(days), target=(0, "disk0000_latency_ms"),
                   partner=(0, partner), leader=(0, leader))


def size_glob(spec: fx.Spec) -> str:
    """A glob over SIZE_COUNTERS per-process CPU counters (all of them when there are fewer)."""
    procs = spec.families[2].count
    return f"{spec.host(0)}/proc0[0-4]??_cpu_pct" if procs >= SIZE_COUNTERS else f"{spec.host(0)}/proc*_cpu_pct"


# -- disk and data --------------------------------------------------------------------------------

def plan_space(spec: fx.Spec, out: Path, per_day: bool) -> bool:
    """Check free space; True when the days must be generated and loaded one at a time."""
    values = spec.counters * spec.rows
    csv, parquet = values * CSV_BYTES_PER_VALUE, values * PARQUET_BYTES_PER_VALUE
    out.mkdir(parents=True, exist_ok=True)
    free = shutil.disk_usage(out).free
    gib = 2 ** 30
    print(f"space: {values:,} values need ~{csv / gib:.1f} GiB of CSV and ~{parquet / gib:.1f} GiB of Parquet;"
          f" {free / gib:.1f} GiB free under {fx._show(out)}", flush=True)
    if free >= csv + parquet + SPARE_BYTES and not per_day:
        return False
    if free < csv / spec.days + parquet + SPARE_BYTES:
        raise SystemExit(f"not enough free space under {out}: need ~{(csv / spec.days + parquet + SPARE_BYTES) / gib:.1f}"
                         f" GiB even one day at a time, {free / gib:.1f} GiB free")
    if not per_day:
        print("space: the whole month of CSV would not fit beside the warehouse: one day at a time", flush=True)
    return True


def day_files(spec: fx.Spec, folder: Path, days: range, latent) -> list[Path]:
    """Write the daily CSV files of `days` (streamed in chunks of rows; memory stays small)."""
    folder.mkdir(parents=True, exist_ok=True)
    chunk = max(16, (4 << 20) // len(spec.columns))        # ~4 M values (32 MB of float64) per chunk
    paths = []
    for d in days:
        path = folder / f"day-{d + 1:02d}.csv"
        t = time.perf_counter()
        fx.write_host_csv(spec, 0, path, latent, first_row=d * DAY_ROWS, count=DAY_ROWS, chunk_rows=chunk)
        if d % 10 == 9 or d == days[-1]:
            print(f"  generated {path.name}: {path.stat().st_size / 1e6:,.0f} MB in {time.perf_counter() - t:.0f} s",
                  flush=True)
        paths.append(path)
    return paths


# -- children -------------------------------------------------------------------------------------

def warehouse_cmd(home: Path, args: list[str], profile: Path | None) -> list[str]:
    """The step's command; with `profile`, under a sampling profiler of every thread (py-spy, when
    on PATH: the reader and the ranks work on threads, which cProfile does not see), else cProfile."""
    cmd = [sys.executable, "-m", "warehouse", "--home", str(home), "-q", *args]
    if profile is None:
        return cmd
    spy = shutil.which("py-spy")
    if spy:
        return [spy, "record", "--format", "raw", "--rate", "50", "--output", str(profile.with_suffix(".spy")),
                "--", *cmd]
    return [sys.executable, "-m", "cProfile", "-o", str(profile), *cmd[1:]]


def child_blas(job: dict) -> dict:
    """X.T @ X for a block of the 1-minute matrix: the product `correlate --pairs` cannot beat."""
    import numpy as np

    n, m = job["rows"], job["columns"]
    b = min(m, 1000)
    x = np.random.default_rng(1).standard_normal((n, b))
    x.T @ x                                                   # warm the BLAS threads
    t = time.perf_counter()
    x.T @ x
    block = time.perf_counter() - t
    return {"block_columns": b, "block_s": block, "full_s": block * (m / b) ** 2,
            "gflops": 2 * n * b * b / block / 1e9}


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    Path(args.result).write_text(json.dumps(child_blas(job)))


def run_step(name: str, cmd: list[str], work: Path, stdout_to_result: bool = True) -> fx.Measured:
    print(f"running {name} ...", flush=True)
    m = fx.run_child(name, cmd, work / f"{name}.json", stdout_to_result=stdout_to_result)
    print(f"  {name}: {fx.fmt(m.wall, '.1f')} s, peak {fx.fmt(m.peak_mib, '.0f')} MiB"
          + (f"  ERROR {m.error}" if m.error else ""), flush=True)
    return m


def ingest_all(spec: fx.Spec, home: Path, work: Path, per_day: bool, keep_csv: bool, profile: Path | None) -> fx.Measured:
    """Generate the month's daily files and load them: one child for all, or one per day."""
    from warehouse.home import init_home

    shutil.rmtree(home, ignore_errors=True)
    init_home(home, zone="UTC")
    csv_dir = work / "csv"
    latent = fx._latent(spec)
    ingest = ["ingest", "--source", "os", "--host", spec.host(0), "--format", "json"]
    t = time.perf_counter()
    if not per_day:
        files = day_files(spec, csv_dir, range(int(spec.days)), latent)
        print(f"\ngenerated {len(files)} daily files, {sum(f.stat().st_size for f in files) / 1e9:.1f} GB,"
              f" in {time.perf_counter() - t:.0f} s", flush=True)
        total = run_step("ingest", warehouse_cmd(home, ingest + [str(f) for f in files], profile), work)
        results = total.info if isinstance(total.info, list) else []
    else:
        total, results = fx.Measured("ingest", wall=0.0, peak_mib=0.0, cpu=0.0), []
        for d in range(int(spec.days)):
            (path,) = day_files(spec, csv_dir, range(d, d + 1), latent)
            m = fx.run_child("ingest", warehouse_cmd(home, ingest + [str(path)], None), work / "ingest.json",
                             stdout_to_result=True)
            path.unlink()
            total.wall += m.wall
            total.cpu += m.cpu
            total.peak_mib = max(total.peak_mib, m.peak_mib)
            total.error = total.error or m.error
            results += m.info if isinstance(m.info, list) else []
        print(f"\n  ingest (30 children): {total.wall:.1f} s, peak {total.peak_mib:.0f} MiB", flush=True)
    if not keep_csv:
        shutil.rmtree(csv_dir, ignore_errors=True)
    values = sum(r.get("values_loaded", 0) for r in results)
    bad = sum(r.get("rows_quarantined", 0) + r.get("cells_quarantined", 0) for r in results)
    total.info = {"files": len(results), "values": values, "quarantined": bad,
                  "expected_values": spec.counters * spec.rows}
    return total


def parquet_facts(home: Path) -> tuple[int, int]:
    files = list((home / "points").rglob("*.parquet"))
    return len(files), sum(f.stat().st_size for f in files)


# -- report ---------------------------------------------------------------------------------------

def report(spec: fx.Spec, runs: dict[str, fx.Measured], home: Path) -> None:
    values = spec.counters * spec.rows
    print(f"\n{fx.machine_note()}\n{fx.code_note()}")
    print(f"data: {spec.counters:,} counters x {int(spec.days)} days x 15 s = {values:,} values")
    files, size = parquet_facts(home)
    print(f"warehouse: {files:,} Parquet files, {size / 2**30:.2f} GiB ({size / max(values, 1):.2f} bytes a value)")
    print(f"\n{'step':<10} {'wall s':>9} {'peak MiB':>9} {'cpu s':>8}  notes")
    for name, m in runs.items():
        print(f"{name:<10} {fx.fmt(m.wall, '9.1f')} {fx.fmt(m.peak_mib, '9.0f')} {fx.fmt(m.cpu, '8.1f')}  {notes(name, m)}")
    print("\ngoals (full scale: 16,000 counters x 30 days; at a smaller --scale they only show the trend):")
    for name, limit in GOALS.items():
        if name in runs:
            m = runs[name]
            fx.goal(f"{name} under {limit / 60:g} min: {m.wall / 60:.2f} min", None if m.error else m.wall < limit)
    if "ingest" in runs:
        peak = runs["ingest"].peak_mib
        fx.goal(f"ingest peak memory under 1 GiB: {peak:.0f} MiB", None if runs["ingest"].error else peak < PEAK_GOAL_MIB)
    if "pairs" in runs and "blas" in runs and not runs["blas"].error:
        floor = runs["blas"].info["full_s"]
        print(f"  pairs took {fx.ratio(runs['pairs'].wall, floor):.1f}x the plain BLAS product ({floor:.1f} s)")


def notes(name: str, m: fx.Measured) -> str:
    if m.error:
        return m.error
    info = m.info if isinstance(m.info, dict) else {}
    if name == "ingest":
        return (f"{info.get('values', 0):,} of {info.get('expected_values', 0):,} values,"
                f" {info.get('quarantined', 0)} quarantined, {info.get('values', 0) / m.wall / 1e6:.1f} M values/s")
    if name == "correlate":
        keys = [r["key"] for r in info.get("results", [])]
        found = [k.split("/")[-1] for k in keys[:5]]
        return f"top: {', '.join(found)}"
    if name == "pairs":
        return f"{len(info.get('pairs', []))} pairs"
    if name == "blas":
        return (f"one {info['block_columns']}-column block {info['block_s']:.2f} s ({info['gflops']:.0f} GFLOP/s),"
                f" full product extrapolated {info['full_s']:.1f} s")
    if name == "rollup":
        return "; ".join(f"{r['period']}: {r['rows']} rows" for r in info.get("rollups", []))
    if name == "size":
        return f"{len(info.get('counters', [])) if isinstance(info.get('counters'), list) else info.get('counters')} counters summed"
    return ""


PLUMBING = ("threading.py", "concurrent/futures", "<frozen runpy>", "click/", "warehouse/__main__.py",
            "warehouse/cli.py")


def print_sampled(path: Path, top: int = 25) -> None:
    """Share of busy samples (waits left out) per function, inclusive, over every thread."""
    from collections import Counter
    inclusive: Counter[str] = Counter()
    busy = 0
    for line in path.read_text().splitlines():
        stack, _, count = line.rpartition(" ")
        frames = stack.split(";")
        if not frames or any(w in frames[-1] for w in ("wait (", "acquire", "_wait_for_tstate_lock")):
            continue
        busy += int(count)
        for name in {f.split(" (")[0] + " (" + f.split(" (")[-1].split(":")[0] + ")" for f in frames if " (" in f}:
            if not any(frame in name for frame in PLUMBING):
                inclusive[name] += int(count)
    print(f"\nsampled profile ({path}, {busy} busy samples over all threads; share inclusive of callees;"
          " the profiled step's wall, peak and cpu above are the profiler's own, not comparable):")
    for name, n in inclusive.most_common(top):
        print(f"  {100 * n / max(busy, 1):5.1f}%  {name}")


def print_profile(path: Path) -> None:
    import pstats
    sampled = path.with_suffix(".spy")
    if sampled.exists():
        print_sampled(sampled)
        return
    if path.exists():
        print(f"\nprofile ({path}):")
        stats = pstats.Stats(str(path))
        stats.sort_stats("cumulative").print_stats(25)
        stats.sort_stats("tottime").print_stats(15)


# -- main -----------------------------------------------------------------------------------------

def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--scale", type=float, default=1.0, help="share of the 16,000 counters (default 1)")
    ap.add_argument("--days", type=int, default=30, help="days of data (default 30)")
    ap.add_argument("--only", default=",".join(STEPS), help=f"subset of {', '.join(STEPS)}")
    ap.add_argument("--per-day", action="store_true", help="generate and load one day at a time (less disk)")
    ap.add_argument("--profile", choices=[s for s in STEPS if s != "blas"],
                    help="profile this step: py-spy over all threads when on PATH, else cProfile")
    ap.add_argument("--keep", action="store_true", help="keep the warehouse (a later --only run without ingest reuses it)")
    ap.add_argument("--keep-csv", action="store_true", help="keep the generated CSV files")
    fx.child_options(ap, ("blas",))
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        child_main(args)
        return
    only = fx.pick(args.only, STEPS, "step")
    spec = spec_for(args.scale, args.days)
    work = args.out / f"scale-{spec.slug()}"
    home = work / "wh"
    work.mkdir(parents=True, exist_ok=True)
    profile = {s: work / f"{s}.prof" for s in STEPS if s == args.profile}
    runs: dict[str, fx.Measured] = {}
    if "ingest" in only:
        per_day = plan_space(spec, args.out, args.per_day)
        runs["ingest"] = ingest_all(spec, home, work, per_day, args.keep_csv, profile.get("ingest"))
    elif not (home / "catalog.duckdb").exists():
        raise SystemExit(f"no warehouse at {home}: run with the ingest step first (and --keep)")
    target = spec.key(spec.target)
    commands = {
        "correlate": ["correlate", target, "--bucket", "1m", "--max-lag", "10", "--format", "json"],
        "pairs": ["correlate", "--pairs", "--top", "100", "--bucket", "1m", "--format", "json"],
        "rollup": ["rollup", "--all", "--format", "json"],
        "size": ["size", size_glob(spec), "--combine", "sum", "--format", "json"],
    }
    for step in STEPS[1:]:
        if step not in only:
            continue
        if step == "blas":
            job = work / "blas-job.json"
            job.write_text(json.dumps({"rows": int(spec.days) * 1440, "columns": spec.counters}))
            runs[step] = run_step(step, fx.child_command(SCRIPT, "blas", job, work / "blas.json"), work,
                                  stdout_to_result=False)
            continue
        runs[step] = run_step(step, warehouse_cmd(home, commands[step], profile.get(step)), work)
    if "correlate" in runs and isinstance(runs["correlate"].info, dict):
        keys = [r["key"] for r in runs["correlate"].info.get("results", [])]
        for role in ("partner", "leader"):
            key = spec.key(getattr(spec, role))
            print(f"planted {role} {key}: rank {keys.index(key) + 1 if key in keys else 'not in the top'}")
    report(spec, runs, home)
    for path in profile.values():
        print_profile(path)
    if not args.keep:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
