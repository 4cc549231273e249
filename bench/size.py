"""Sizing benchmark: `warehouse size ... --combine sum` against pandas on the same Parquet files.

Usage (from the project root, in the venv):

    python bench/size.py                 # the goal case plus a one-counter case
    python bench/size.py --quick         # about a tenth of the size
    python bench/size.py --cases month --repeat 3
    python bench/size.py --cases week --only ours-lib --profile bench/out/size.prof

Cases:
  month  520 counters (13 volume-IOPS counters on each of 40 hosts) x 30 days at 15 s, 89.9 M points,
         selector '*/vol*_iops': the issue's "a month of 500 counters at 15 s summed across hosts".
  week   the shared 2,000-counter week (80.6 M points in the warehouse); selector '*/vol00_iops',
         one counter name on all 40 hosts.

Alternatives, each in its own child process (wall time includes start-up and imports; peak memory
is that child's own maximum resident set size, from os.wait4):
  ours-cli  `warehouse --home H size SEL --combine sum --format json` (the command itself)
  ours-lib  the same through `size_selector` in a small Python child, timed inside too
  pandas    pd.read_parquet of the committed points files filtered to the selected counter ids,
            1-minute bucket means per counter, sum across counters per bucket, then mean, sd,
            min, max and p50/p95/p99. Ours computes more: a 1000-replicate moving-block bootstrap
            interval, n_effective, and the trend / level-shift / gap cautions.

Both must agree on mean and p95 to 1e-9 (relative), or the comparison is not fair and is flagged.
This is a measuring tool, not a test: nothing here asserts; goals are printed as met or missed.
"""
from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402

SCRIPT = Path(__file__).resolve()
ALTERNATIVES = ("ours-cli", "ours-lib", "pandas")
CASES = {
    "month": (fx.month_volumes, "*/vol*_iops"),
    "week": (fx.week, "*/vol00_iops"),
}
TOLERANCE = 1e-9


# -- children ------------------------------------------------------------------------------------

def child_ours_lib(job: dict, profile: str | None) -> dict:
    from warehouse.home import open_warehouse
    from warehouse.sizing import SizeRequest, size_selector

    def run() -> dict:
        with open_warehouse(job["home"]) as wh:
            return size_selector(wh, SizeRequest(job["selector"], combine="sum"))

    out = fx.profile_call(run, profile)
    return {k: out[k] for k in ("counters", "n", "mean", "sd", "min", "max", "p50", "p95", "p99",
                                "quantile_ci_low", "quantile_ci_high")}


def child_pandas(job: dict, profile: str | None) -> dict:
    import pandas as pd

    def run() -> dict:
        df = pd.read_parquet(job["files"], columns=["ts", "counter_id", "value"],
                             filters=[("counter_id", "in", job["ids"])])
        df["bucket"] = df["ts"].dt.floor("60s")
        per_counter = df.groupby(["counter_id", "bucket"], sort=False)["value"].mean()
        del df
        combined = per_counter.groupby(level="bucket").sum()
        q = combined.quantile([0.5, 0.95, 0.99])
        return {"counters": int(per_counter.index.get_level_values(0).nunique()), "n": int(len(combined)),
                "mean": float(combined.mean()), "sd": float(combined.std(ddof=0)),
                "min": float(combined.min()), "max": float(combined.max()),
                "p50": float(q.loc[0.5]), "p95": float(q.loc[0.95]), "p99": float(q.loc[0.99])}

    return fx.profile_call(run, profile)


CHILDREN = {"ours-lib": child_ours_lib, "pandas": child_pandas}


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    fx.preload(args.child)
    t0 = time.perf_counter()
    info = CHILDREN[args.child](job, args.profile)
    info["work_s"] = time.perf_counter() - t0
    Path(args.result).write_text(json.dumps(info))


# -- parent --------------------------------------------------------------------------------------

def warehouse_command() -> list[str]:
    script = Path(sys.executable).with_name("warehouse")
    return [str(script)] if script.exists() else [sys.executable, "-m", "warehouse"]


def run_alternative(name: str, job_path: Path, job: dict, work: Path, profile: str | None) -> fx.Measured:
    result = work / f"{name}.json"
    if name == "ours-cli":
        cmd = warehouse_command() + ["--home", job["home"], "--quiet", "size", job["selector"],
                                     "--combine", "sum", "--format", "json"]
        return fx.run_child(name, cmd, result, stdout_to_result=True)
    cmd = fx.child_command(SCRIPT, name, job_path, result)
    if profile:
        cmd += ["--profile", profile]
    return fx.run_child(name, cmd, result)


def relative(a: float, b: float) -> float:
    return abs(a - b) / max(abs(a), abs(b), 1e-300)


def report(case: str, job: dict, runs: dict[str, fx.Measured]) -> None:
    points = job["points"]
    print()
    print(f"case {case}: selector {job['selector']!r}, {len(job['ids'])} counters, {points:,} points selected"
          f" ({points * 20 / 2**20:,.0f} MiB as ts+id+value in memory) of {job['warehouse_points']:,} in the warehouse")
    head = (f"{'alternative':<10} {'wall s':>7} {'slowest':>7} {'work s':>7} {'cpu s':>7} {'peak MiB':>9} {'load':>5} {'Mpts/s':>7}"
            f" {'wall vs ours-cli':>17} {'peak vs ours-cli':>17}")
    print(head)
    print("-" * len(head))
    base = runs.get("ours-cli")
    for name in ALTERNATIVES:
        r = runs.get(name)
        if r is None:
            continue
        if r.error:
            print(f"{name:<10} failed: {r.error}")
            continue
        print(f"{name:<10} {r.wall:7.2f} {r.spread:>7} {fx.fmt(r.work):>7} {r.cpu:7.2f} {r.peak_mib:9.0f} {r.load:5.2f} {points / 1e6 / r.wall:7.1f}"
              f" {fx.fmt(fx.ratio(r.wall, base.wall) if base and not base.error else math.nan, '.2f') + 'x':>17}"
              f" {fx.fmt(fx.ratio(r.peak_mib, base.peak_mib) if base and not base.error else math.nan, '.2f') + 'x':>17}")
    print("wall: the whole child (start-up, imports, query), fastest of the rounds; slowest: the slowest round; work: inside the child after imports;"
          " cpu: user + system seconds, all threads;")
    print("load: 1-min load average at its start (other work shares the machine).")
    ours = next((runs[n] for n in ("ours-cli", "ours-lib") if n in runs and not runs[n].error), None)
    theirs = runs.get("pandas")
    if ours and theirs and not theirs.error:
        fields = ("n", "mean", "sd", "min", "max", "p50", "p95", "p99")
        print("agreement (ours vs pandas): " + ", ".join(
            f"{f} {relative(float(ours.info[f]), float(theirs.info[f])):.1e}" for f in fields))
        print(f"  ours also: {ours.info.get('quantile_ci_low', '-')} .. {ours.info.get('quantile_ci_high', '-')}"
              " bootstrap interval of p95 (1000 replicates)" if "quantile_ci_low" in ours.info else "")
        fair = all(relative(float(ours.info[f]), float(theirs.info[f])) <= TOLERANCE for f in ("mean", "p95"))
        fx.goal(f"same mean and p95 to {TOLERANCE:g} relative (the comparison is fair)", fair)
        cli = runs.get("ours-cli")
        if cli and not cli.error:
            speed = theirs.wall / cli.wall
            fx.goal(f"ours-cli >= 3x faster than pandas (wall): {speed:.2f}x", speed >= 3)
            fx.goal(f"ours-cli less peak memory than pandas: {cli.peak_mib:.0f} vs {theirs.peak_mib:.0f} MiB"
                    f" ({theirs.peak_mib / cli.peak_mib:.2f}x less)", cli.peak_mib < theirs.peak_mib)
        lib = runs.get("ours-lib")
        if lib and not lib.error and not math.isnan(theirs.work):
            print(f"  (inside the children, after imports: ours-lib {lib.work:.2f} s vs pandas {theirs.work:.2f} s,"
                  f" {theirs.work / lib.work:.2f}x)")


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="about a tenth of the size (3 days / 0.7 days)")
    ap.add_argument("--cases", default="month,week", help="comma-separated subset of month, week")
    ap.add_argument("--only", default=",".join(ALTERNATIVES), help=f"subset of {', '.join(ALTERNATIVES)}")
    ap.add_argument("--repeat", type=int, default=1,
                    help="rounds over all alternatives; each one's fastest wall is shown (with its work, cpu)")
    ap.add_argument("--profile", help="write a cProfile dump of each Python child (not ours-cli) to this path")
    fx.child_options(ap, CHILDREN)
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        child_main(args)
        return
    names = fx.pick(args.only, ALTERNATIVES)
    cases = fx.pick(args.cases, CASES, "case")
    print(fx.machine_note())
    print(fx.code_note())
    out = args.out.resolve()
    for case in cases:
        make_spec, selector = CASES[case]
        spec = make_spec(args.quick)
        home = fx.ensure(spec, out)
        facts = fx.catalog_facts(home, {"sel": selector})
        ids = facts["ids"]["sel"]
        stamp = json.loads((home / "fixture.json").read_text())
        job = {"home": str(home), "selector": selector, "ids": ids, "files": facts["files"],
               "points": len(ids) * spec.rows, "warehouse_points": stamp["points"]}
        work = Path(tempfile.mkdtemp(prefix="size-", dir=out))
        job_path = work / "job.json"
        job_path.write_text(json.dumps(job))
        fx.warm(facts["files"])
        runs: dict[str, fx.Measured] = {}
        rounds = max(1, args.repeat)
        for i in range(rounds):         # rounds, so that drifting load on the machine hits every alternative
            for name in ALTERNATIVES:
                if name not in names:
                    continue
                print(f"{case}: running {name}" + (f" (round {i + 1}/{rounds})" if rounds > 1 else ""), flush=True)
                run = run_alternative(name, job_path, job, work, args.profile)
                print(f"  {run.wall:.2f} s wall, {fx.fmt(run.work)} s work, {run.cpu:.2f} s cpu, peak {run.peak_mib:.0f} MiB,"
                      f" load {run.load:.2f} {run.error}", flush=True)
                fx.keep_best(runs, run)
        report(case, job, runs)
        for f in work.iterdir():
            f.unlink()
        work.rmdir()
    print()
    print(fx.machine_note())


if __name__ == "__main__":
    main()
