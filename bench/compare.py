"""Compare/changes benchmark: the Hodges-Lehmann selection against listing every pair, and
`warehouse changes` against the same statistics and scores computed by pandas.

Usage (from the project root, in the venv):

    python bench/compare.py                   # both cases, once each
    python bench/compare.py --cases hl        # the shift only (no warehouse needed)
    python bench/compare.py --repeat 3        # best wall of 3 per alternative

Cases and alternatives, each in its own child process (wall: the whole child, imports included;
work: timed inside the child after its imports; peak: the child's own maximum resident set size):

  hl       two seeded samples of AR(1) noise rounded to 3 decimals (ties, as counters have)
    ours-hl-40k    stats.compare.shift_interval on 40,000 x 40,000 (1.6e9 pairs; listing them would
                   take 12.8 GB): median and the two interval ends, each by selection
    ours-hl-6k     the same on 6,000 x 6,000 (36 M pairs, above the listing threshold, so selection)
    numpy-hl-6k    numpy: all 36 M differences (np.subtract.outer), np.partition at the same ranks
  changes  the shared fixture of 520 counters x 30 days at 15 s (bench/warehouse_fixture.py,
           month_volumes: 89.9 M points); period 2026-W13 against the 3 weeks before it
    ours-changes   warehouse.changes.find_changes (one grouped DuckDB query over the points, or the
                   rollup tables where they are complete and current: `sources` says which)
    ours-stats     warehouse.changes.raw_stats alone: the grouped query, without scoring
    pandas-changes pd.read_parquet of every file, the week of each point, groupby (counter, week):
                   count, mean, population sd, p95; then median / MAD scores per counter

This is a measuring tool, not a test: nothing here asserts; agreement and goals are printed.
"""
from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402

SCRIPT = Path(__file__).resolve()
CASES = {
    "hl": ("ours-hl-40k", "ours-hl-6k", "numpy-hl-6k"),
    "changes": ("ours-changes", "ours-stats", "pandas-changes"),
}
PERIOD = "2026-W13"
HISTORY = 3


# -- children ------------------------------------------------------------------------------------

def _samples(n: int, seed: int):
    import numpy as np
    from scipy.signal import lfilter

    rng = np.random.default_rng(seed)
    x = lfilter([1.0], [1.0, -0.7], rng.standard_normal(n)).round(3)
    y = (lfilter([1.0], [1.0, -0.7], rng.standard_normal(n)) + 0.05).round(3)
    return x, y


def child_ours_hl(job: dict, n: int) -> dict:
    from warehouse.stats.compare import shift_interval

    x, y = _samples(n, job["seed"])
    t = time.perf_counter()
    s = shift_interval(x, y, 0.95)
    return {"estimate": s.estimate, "low": s.low, "high": s.high, "rank_low": s.rank_low,
            "compute_s": time.perf_counter() - t}


def child_numpy_hl(job: dict, n: int) -> dict:
    import numpy as np

    from warehouse.stats.compare import critical_count

    x, y = _samples(n, job["seed"])
    t = time.perf_counter()
    d = np.subtract.outer(y, x).ravel()
    total = d.size
    _, counts = np.unique(np.concatenate([x, y]), return_counts=True)
    tie = float(np.sum(counts.astype(float) ** 3 - counts))
    c = critical_count(n, n, 0.95, tie_term=tie, exact=False)
    ranks = [(total + 1) // 2, total // 2 + 1, c, total + 1 - c]
    part = np.partition(d, [r - 1 for r in ranks])
    a, b, low, high = (float(part[r - 1]) for r in ranks)
    return {"estimate": (a + b) / 2, "low": low, "high": high, "rank_low": c, "compute_s": time.perf_counter() - t}


def child_ours_changes(job: dict) -> dict:
    from warehouse.changes import ChangesRequest, find_changes
    from warehouse.home import open_warehouse

    with open_warehouse(job["home"]) as wh:
        r = find_changes(wh, ChangesRequest(period=PERIOD, history=HISTORY, top=10))
    return {"top": [x["key"] for x in r["results"]], "scores": [x["score"] for x in r["results"]],
            "scored": r["counters_scored"], "sources": r["sources"]}


def child_ours_stats(job: dict) -> dict:
    from warehouse.changes import raw_stats
    from warehouse.home import open_warehouse
    from warehouse.timeutil import parse_period, period_before

    with open_warehouse(job["home"]) as wh:
        p = parse_period(PERIOD, wh.zone)
        stats = raw_stats(wh, [p] + [period_before(p, k, wh.zone) for k in range(1, HISTORY + 1)], None)
    return {"rows": int(len(stats)), "points": int(stats["n"].sum())}


def child_pandas_changes(job: dict) -> dict:
    import numpy as np
    import pandas as pd

    start = pd.Timestamp(job["history_start"])
    df = pd.read_parquet(job["files"], columns=["ts", "counter_id", "value"])
    df = df[(df["ts"] >= start) & (df["ts"] < start + pd.Timedelta(weeks=HISTORY + 1))]
    df["k"] = HISTORY - ((df["ts"] - start) // pd.Timedelta(weeks=1)).astype(int)
    g = df.groupby(["counter_id", "k"])["value"]
    stats = pd.DataFrame({"n": g.size(), "mean": g.mean(), "sd": g.std(ddof=0), "p95": g.quantile(0.95)}).reset_index()
    cur = stats[stats["k"] == 0].set_index("counter_id")
    hist = stats[stats["k"] > 0]
    center = hist.groupby("counter_id")["mean"].median()
    mad = hist.assign(dev=(hist["mean"] - hist["counter_id"].map(center)).abs()).groupby("counter_id")["dev"].median()
    floor = hist.groupby("counter_id")["sd"].median() / np.sqrt(hist.groupby("counter_id")["n"].median())
    scale = np.maximum(1.4826 * mad, floor)
    score = (cur["mean"] - center) / scale
    order = score.abs().sort_values(ascending=False, kind="stable").index[:10]
    keys = job["keys"]
    return {"top": [keys[str(c)] for c in order], "scores": [float(score[c]) for c in order],
            "scored": int(score.notna().sum())}


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    name = args.child
    fx.preload("ours" if name.startswith("ours") else "pandas")
    import numpy  # noqa: F401  (imports outside the timed work)
    t0 = time.perf_counter()
    if name.startswith("ours-hl") or name.startswith("numpy-hl"):
        n = 40_000 if name.endswith("40k") else 6_000
        info = (child_ours_hl if name.startswith("ours") else child_numpy_hl)(job, n)
    else:
        info = {"ours-changes": child_ours_changes, "ours-stats": child_ours_stats,
                "pandas-changes": child_pandas_changes}[name](job)
    info["work_s"] = time.perf_counter() - t0
    Path(args.result).write_text(json.dumps(info))


# -- parent --------------------------------------------------------------------------------------

def changes_job() -> dict:
    spec = fx.month_volumes()
    home = fx.ensure(spec)
    facts = fx.catalog_facts(home, {})
    from warehouse.home import open_warehouse
    from warehouse.timeutil import local_datetime, parse_period, period_before

    with open_warehouse(home) as wh:
        keys = {str(cid): key for cid, key in wh.con.execute("SELECT counter_id, key FROM counters").fetchall()}
        first = period_before(parse_period(PERIOD, wh.zone), HISTORY, wh.zone)
        start = local_datetime(first.start_us, wh.zone).isoformat()
    fx.warm(facts["files"])
    return {"home": str(home), "files": facts["files"], "keys": keys, "history_start": start}


def report(case: str, runs: dict[str, fx.Measured]) -> None:
    print(f"\n{case}:")
    print(f"  {'alternative':16s} {'wall s':>8s} {'work s':>8s} {'cpu s':>7s} {'peak MiB':>9s}  result")
    for name, m in runs.items():
        shown = {k: v for k, v in m.info.items() if k not in ("work_s", "top", "scores")}
        print(f"  {name:16s} {m.wall:8.2f} {fx.fmt(m.work):>8s} {m.cpu:7.2f} {m.peak_mib:9.0f}  {m.error or shown}")
    if case == "hl" and {"ours-hl-6k", "numpy-hl-6k"} <= set(runs):
        a, b = runs["ours-hl-6k"], runs["numpy-hl-6k"]
        same = all(a.info.get(k) == b.info.get(k) for k in ("estimate", "low", "high"))
        print(f"  6k x 6k: ours and numpy give {'the same' if same else 'DIFFERENT'} estimate and interval;"
              f" numpy / ours work {fx.ratio(b.work, a.work):.1f}x, peak memory {fx.ratio(b.peak_mib, a.peak_mib):.1f}x")
        if "ours-hl-40k" in runs:
            fx.goal(f"40,000 x 40,000 shift and interval in under 5 s of work ({runs['ours-hl-40k'].work:.2f} s)",
                    runs["ours-hl-40k"].work < 5)
    if case == "changes" and {"ours-changes", "pandas-changes"} <= set(runs):
        a, b = runs["ours-changes"], runs["pandas-changes"]
        print(f"  top 10 {'agree' if a.info.get('top') == b.info.get('top') else 'DIFFER'};"
              f" pandas / ours wall {fx.ratio(b.wall, a.wall):.1f}x, work {fx.ratio(b.work, a.work):.1f}x,"
              f" peak memory {fx.ratio(b.peak_mib, a.peak_mib):.1f}x")
        fx.goal("ours faster than pandas with less memory", a.wall < b.wall and a.peak_mib < b.peak_mib)


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cases", default="hl,changes", help="comma-separated subset of hl, changes")
    ap.add_argument("--repeat", type=int, default=1, help="runs per alternative (best wall kept)")
    ap.add_argument("--child", help=argparse.SUPPRESS)
    ap.add_argument("--job", help=argparse.SUPPRESS)
    ap.add_argument("--result", help=argparse.SUPPRESS)
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        child_main(args)
        return
    print(fx.machine_note())
    print(fx.code_note())
    for case in fx.pick(args.cases, CASES, "case"):
        job = {"seed": 20260302} if case == "hl" else changes_job()
        work = Path(tempfile.mkdtemp(prefix="compare-", dir=fx.OUT if fx.OUT.exists() else None))
        job_path = work / "job.json"
        job_path.write_text(json.dumps(job))
        runs: dict[str, fx.Measured] = {}
        for _ in range(max(1, args.repeat)):
            for name in CASES[case]:
                print(f"{case}: running {name}", flush=True)
                run = fx.run_child(name, fx.child_command(SCRIPT, name, job_path, work / f"{name}.json"),
                                   work / f"{name}.json")
                fx.keep_best(runs, run)
        report(case, runs)
        for f in work.iterdir():
            f.unlink()
        work.rmdir()
    print()
    print(fx.machine_note())


if __name__ == "__main__":
    main()
