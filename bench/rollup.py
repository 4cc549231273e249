"""Rollup benchmark: `warehouse rollup --all` against the same weekly statistics by pandas, and
`rollup --due` after one more day is loaded against `rollup --all` of the grown warehouse.

Usage (from the project root, in the venv):

    python bench/rollup.py                # 2,000 counters x 4 weeks at 15 s (322.6 M points)
    python bench/rollup.py --quick        # 2,000 counters x 3 days
    python bench/rollup.py --only ours-all,pandas

Data (invented): bench/warehouse_fixture.py's per-host counters (40 hosts x 50 counters, a daily
rhythm plus noise), 28 days from Monday 2 March 2026 at 15 s, built once through our own ingest and
cached under bench/out/. The rollups run on a clone of it (catalog copied, Parquet files
hard-linked) so the cached fixture never changes; the extra day is loaded into the clone only.

Alternatives, each in its own child process (wall: the whole child, start-up and imports included;
peak: the child's own maximum resident set size):
  ours-all       `warehouse rollup --all --period week` (CLI): the weekly rows for every counter,
                 written to the catalog in one transaction.
  ours-all-dwm   the same with --period day --period week --period month (for scale; not compared).
  pandas         per week and per block of counters (the same blocks as ours), pd.read_parquet of
                 that week's files with filters on counter id and time, then groupby: count, mean,
                 population sd, min, max, quantiles 0.5/0.95/0.99 (linear), M2, the sizing bound at
                 0.95, the busiest clock hour's mean and the median in-hour sample spacing. Its rows
                 are compared with ours (largest relative difference per statistic).
  ours-due       after one more day (Monday 30 March, 11.5 M points) is loaded through our ingest:
                 `warehouse rollup --due --period week` (recomputes the one week the day touched).
  ours-all-grown `warehouse rollup --all --period week` on the grown warehouse, to compare with ours-due.

This is a measuring tool, not a test: nothing here asserts; goals are printed as met or missed.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402

SCRIPT = Path(__file__).resolve()
ALTERNATIVES = ("ours-all", "ours-all-dwm", "pandas", "ours-due", "ours-all-grown")
STATS = ("n", "mean", "sd", "min", "max", "p50", "p95", "p99", "m2", "bound", "busiest_hour_mean", "interval_s")
TOLERANCE = 1e-9


def spec_for(quick: bool) -> fx.Spec:
    return fx.Spec("rollup", 40, fx.HOST_COLUMNS, 3.0 if quick else 28.0, target=None, partner=None, leader=None)


# -- children ------------------------------------------------------------------------------------

def child_pandas(job: dict, profile: str | None) -> dict:
    import pandas as pd

    from warehouse.rollup import POINTS_PER_QUERY

    def week(files: list[str], lo: pd.Timestamp, hi: pd.Timestamp, cid_lo: int, cid_hi: int) -> pd.DataFrame:
        df = pd.read_parquet(files, columns=["ts", "counter_id", "value"],
                             filters=[("counter_id", ">=", cid_lo), ("counter_id", "<=", cid_hi),
                                      ("ts", ">=", lo), ("ts", "<", hi)])
        g = df.groupby("counter_id")["value"]
        out = g.agg(["count", "mean", "min", "max"]).rename(columns={"count": "n"})
        out["sd"] = g.std(ddof=0)
        q = g.quantile([0.5, 0.95, 0.99]).unstack()
        out["p50"], out["p95"], out["p99"] = q[0.5], q[0.95], q[0.99]
        out["m2"] = out["sd"] ** 2 * out["n"]
        out["bound"] = out["mean"] + math.sqrt(0.95 / 0.05) * out["sd"]
        df["hour"] = df["ts"].dt.floor("h")
        h = df.groupby(["counter_id", "hour"]).agg(hm=("value", "mean"), k=("value", "size"),
                                                   t0=("ts", "min"), t1=("ts", "max"))
        h["spacing"] = (h["t1"] - h["t0"]).dt.total_seconds() / (h["k"] - 1).where(h["k"] > 1)
        per = h.groupby(level=0).agg(busiest_hour_mean=("hm", "max"), interval_s=("spacing", "median"))
        out = out.join(per)
        out["period_start"] = lo.date()
        return out.reset_index()

    def run() -> dict:
        parts = []
        for w in job["weeks"]:
            lo, hi = pd.Timestamp(w["lo"]), pd.Timestamp(w["hi"])
            blocks = max(1, math.ceil(w["points"] / POINTS_PER_QUERY))
            edges = [1 + round(i * job["counters"] / blocks) for i in range(blocks + 1)]
            for a, b in zip(edges, edges[1:]):
                parts.append(week(w["files"], lo, hi, a, b - 1))
        table = pd.concat(parts, ignore_index=True)
        table.to_parquet(job["pandas_out"])
        return {"rows": len(table)}

    return fx.profile_call(run, profile)


CHILDREN = {"pandas": child_pandas}


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    fx.preload(args.child)
    t0 = time.perf_counter()
    info = CHILDREN[args.child](job, args.profile)
    info["work_s"] = time.perf_counter() - t0
    Path(args.result).write_text(json.dumps(info))


# -- parent --------------------------------------------------------------------------------------

def clone(home: Path, to: Path) -> Path:
    """A writable copy of a cached warehouse: the catalog copied, the Parquet files hard-linked."""
    shutil.rmtree(to, ignore_errors=True)
    shutil.copytree(home, to, copy_function=os.link, ignore=shutil.ignore_patterns("catalog.duckdb*", "fixture.json"))
    shutil.copy2(home / "catalog.duckdb", to / "catalog.duckdb")
    return to


def add_day(spec: fx.Spec, home: Path, work: Path) -> int:
    """Load one more day (the day after the fixture ends) for every host through our ingest."""
    from warehouse.ingest.run import IngestOptions, ingest_files

    day = fx.Spec(spec.name, spec.hosts, spec.families, 1.0, spec.interval, spec.seed + 1, None, None, None)
    start = fx.START
    # write_host_csv starts every file at fx.START; the new day begins where the fixture ends
    fx.START = _shift(start, spec.days)
    try:
        latent = fx._latent(day)
        points = 0
        for h in range(spec.hosts):
            csv = work / f"day-{spec.host(h)}.csv"
            points += fx.write_host_csv(day, h, csv, latent)
            (res,) = ingest_files(home, [csv], IngestOptions(source=fx.SOURCE, host=spec.host(h)))
            csv.unlink()
            if res.status != "loaded":
                raise SystemExit(f"loading the extra day failed: {res.message}")
    finally:
        fx.START = start
    return points


def _shift(start: str, days: float) -> str:
    from datetime import datetime, timedelta
    return (datetime.fromisoformat(start) + timedelta(days=days)).isoformat()


def weeks_of(home: Path) -> tuple[list[dict], int]:
    """Each week's bounds, files and points, as the rollup would read them (the fixture is in UTC)."""
    from warehouse.home import open_warehouse
    from warehouse.rollup import _files_for, local_midnight, next_period, periods_between

    with open_warehouse(home) as wh:
        first, last = wh.con.execute("SELECT min(first_ts), max(last_ts) FROM ingests").fetchone()
        out = []
        for start in periods_between("week", first, last, wh.zone):
            lo, hi = local_midnight(start, wh.zone), local_midnight(next_period("week", start), wh.zone)
            files = _files_for(wh, lo, hi)
            out.append({"lo": lo.isoformat(), "hi": hi.isoformat(), "files": [str(home / f) for f, _, _ in files],
                        "points": sum(r for _, _, r in files)})
        counters = wh.con.execute("SELECT max(counter_id) FROM counter_defs").fetchone()[0]
    return out, counters


def warehouse_command() -> list[str]:
    script = Path(sys.executable).with_name("warehouse")
    return [str(script)] if script.exists() else [sys.executable, "-m", "warehouse"]


def run_ours(name: str, home: Path, periods: list[str], mode: str, work: Path) -> fx.Measured:
    cmd = warehouse_command() + ["--home", str(home), "--quiet", "rollup", f"--{mode}", "--format", "json"]
    for p in periods:
        cmd += ["--period", p]
    return fx.run_child(name, cmd, work / f"{name}.json", stdout_to_result=True)


def agreement(home: Path, pandas_out: Path) -> dict[str, float]:
    """Largest relative difference per statistic between our rollup_week rows and pandas' rows."""
    import pandas as pd

    from warehouse.home import open_warehouse

    theirs = pd.read_parquet(pandas_out)
    with open_warehouse(home) as wh:
        ours = wh.con.execute(f"SELECT period_start, counter_id, {', '.join(STATS)} FROM rollup_week").df()
    theirs["period_start"] = pd.to_datetime(theirs["period_start"])
    ours["period_start"] = pd.to_datetime(ours["period_start"])
    both = ours.merge(theirs, on=["period_start", "counter_id"], suffixes=("", "_pd"))
    diffs = {"rows_ours": float(len(ours)), "rows_pandas": float(len(theirs)), "rows_matched": float(len(both))}
    for s in STATS:
        a, b = both[s].astype(float), both[f"{s}_pd"].astype(float)
        diffs[s] = float(((a - b).abs() / a.abs().combine(b.abs(), max).clip(lower=1e-300)).max())
    return diffs


def show(name: str, r: fx.Measured, points: int, base: fx.Measured | None) -> None:
    if r.error:
        print(f"{name:<15} failed: {r.error}")
        return
    vs = fx.fmt(fx.ratio(r.wall, base.wall) if base and not base.error else math.nan, ".2f") + "x"
    print(f"{name:<15} {r.wall:8.2f} {fx.fmt(r.work):>7} {r.cpu:8.2f} {r.peak_mib:9.0f} {r.load:5.2f}"
          f" {points / 1e6 / r.wall:8.2f} {vs:>12}")


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="3 days instead of 4 weeks")
    ap.add_argument("--only", default=",".join(ALTERNATIVES), help=f"subset of {', '.join(ALTERNATIVES)}")
    ap.add_argument("--profile", help="write a cProfile dump of the pandas child to this path")
    fx.child_options(ap, CHILDREN)
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        child_main(args)
        return
    names = fx.pick(args.only, ALTERNATIVES)
    print(fx.machine_note())
    print(fx.code_note())
    out = args.out.resolve()
    spec = spec_for(args.quick)
    t0 = time.perf_counter()
    cached = fx.ensure(spec, out)
    print(f"fixture ready in {time.perf_counter() - t0:.0f} s")
    work = out / f"rollup-work-{spec.slug()}"
    home = clone(cached, work / "wh")
    weeks, counters = weeks_of(home)
    points = sum(w["points"] for w in weeks)
    job = {"weeks": weeks, "counters": counters, "pandas_out": str(work / "pandas-rows.parquet")}
    job_path = work / "job.json"
    job_path.write_text(json.dumps(job))
    fx.warm([f for w in weeks for f in w["files"]])
    runs: dict[str, fx.Measured] = {}
    for name in ("ours-all", "ours-all-dwm", "pandas"):
        if name not in names:
            continue
        print(f"running {name}", flush=True)
        if name == "pandas":
            cmd = fx.child_command(SCRIPT, name, job_path, work / "pandas.json")
            runs[name] = fx.run_child(name, cmd + (["--profile", args.profile] if args.profile else []), work / "pandas.json")
        else:
            runs[name] = run_ours(name, home, ["week"] if name == "ours-all" else ["day", "week", "month"], "all", work)
        print(f"  {runs[name].wall:.2f} s wall, peak {runs[name].peak_mib:.0f} MiB, load {runs[name].load:.2f} {runs[name].error}",
              flush=True)
    diffs = None
    if all(n in runs and not runs[n].error for n in ("ours-all", "pandas")):
        diffs = agreement(home, Path(job["pandas_out"]))   # before the extra day; ours-all-dwm left the same weekly rows
    grown_points = 0
    if {"ours-due", "ours-all-grown"} & set(names):
        if "ours-all" not in runs:      # --due must start from a rolled-up warehouse
            run_ours("setup", home, ["week"], "all", work)
        t = time.perf_counter()
        grown_points = add_day(spec, home, work)
        print(f"loaded one more day: {grown_points:,} points in {time.perf_counter() - t:.0f} s", flush=True)
        for name, mode in (("ours-due", "due"), ("ours-all-grown", "all")):
            if name in names:
                print(f"running {name}", flush=True)
                runs[name] = run_ours(name, home, ["week"], mode, work)
                print(f"  {runs[name].wall:.2f} s wall, peak {runs[name].peak_mib:.0f} MiB {runs[name].error}", flush=True)

    print()
    print(f"warehouse: {counters:,} counters, {len(weeks)} weeks, {points:,} points at {spec.interval} s")
    head = f"{'alternative':<15} {'wall s':>8} {'work s':>7} {'cpu s':>8} {'peak MiB':>9} {'load':>5} {'Mpts/s':>8} {'vs ours-all':>12}"
    print(head)
    print("-" * len(head))
    base = runs.get("ours-all")
    for name in ("ours-all", "ours-all-dwm", "pandas"):
        if name in runs:
            show(name, runs[name], points * (3 if name == "ours-all-dwm" else 1), base)
    print("wall: the whole child (start-up, imports, reading, writing); Mpts/s: points summarised per wall second"
          " (ours-all-dwm reads every point three times)")
    if diffs is not None:
        print("agreement (ours vs pandas, largest relative difference): "
              + ", ".join(f"{s} {diffs[s]:.1e}" for s in STATS))
        print(f"  rows: ours {diffs['rows_ours']:.0f}, pandas {diffs['rows_pandas']:.0f}, matched {diffs['rows_matched']:.0f}")
        fair = all(diffs[s] <= TOLERANCE for s in STATS) and diffs["rows_matched"] == diffs["rows_ours"] == diffs["rows_pandas"]
        fx.goal(f"same rows and statistics to {TOLERANCE:g} relative (the comparison is fair)", fair)
        speed = runs["pandas"].wall / base.wall
        fx.goal(f"ours-all faster than pandas (wall): {speed:.2f}x", speed > 1)
        fx.goal(f"ours-all less peak memory than pandas: {base.peak_mib:.0f} vs {runs['pandas'].peak_mib:.0f} MiB",
                base.peak_mib < runs["pandas"].peak_mib)
    due, grown = runs.get("ours-due"), runs.get("ours-all-grown")
    if due and grown and not due.error and not grown.error:
        print()
        print(f"after one more day ({grown_points:,} points; with --quick it falls in the same week, so --due"
              " has the whole week to redo):" if args.quick else f"after one more day ({grown_points:,} points):")
        print(f"  rollup --due  {due.wall:7.2f} s wall, {due.cpu:7.2f} s cpu, peak {due.peak_mib:.0f} MiB:"
              f" {due.info['rollups'][0]['periods']} week(s), {due.info['rollups'][0]['rows']} rows")
        print(f"  rollup --all  {grown.wall:7.2f} s wall, {grown.cpu:7.2f} s cpu, peak {grown.peak_mib:.0f} MiB:"
              f" {grown.info['rollups'][0]['periods']} week(s), {grown.info['rollups'][0]['rows']} rows")
        share = due.wall / grown.wall
        fx.goal(f"--due costs a small fraction of --all: {share:.1%} of its wall time", share <= 0.25)
    print()
    print(fx.machine_note())


if __name__ == "__main__":
    main()
