"""Correlate benchmark: `correlate_target` / `correlate_pairs` against DuckDB SQL, pandas and BLAS.

Usage (from the project root, in the venv):

    python bench/correlate.py                 # 2,000 counters x 1 week at 15 s (80.6 M points)
    python bench/correlate.py --quick         # 0.7 days (8.1 M points)
    python bench/correlate.py --only ours-pearson,duckdb-pearson --repeat 3
    python bench/correlate.py --only ours-spearman --profile bench/out/prof

The warehouse is the shared fixture (bench/warehouse_fixture.py): 40 hosts x 50 counters, built
once through our ingest. The target is host01/vol00_latency_ms; host29/cpu3_busy_pct shares its
bursts at the same time and host17/net2_in_kbps three minutes earlier (lag +3 at 1-minute buckets).

Alternatives, each in its own child process (wall time includes start-up and imports; peak memory
is that child's own maximum resident set size, from os.wait4; "work" is timed inside the child
after its imports):

  ours-pearson         correlate_target, method pearson, rhythm keep, lag 0, every counter returned
  duckdb-pearson       DuckDB SQL on the committed Parquet files: 1-minute bucket means, joined to the
                       target's, corr() per counter
  pandas-pearson       pd.read_parquet of the same files, bucket means, unstack (pivot), corrwith
  ours-spearman        correlate_target, method spearman (the default)
  duckdb-spearman      as duckdb-pearson on average ranks: rank() window plus half the ties (count() window)
  pandas-spearman      as pandas-pearson after DataFrame.rank() (average ranks)
  ours-spearman-lag10  ours-spearman with --max-lag 10 (21 lags)
  ours-pearson-lag10   ours-pearson with --max-lag 10
  ours-pairs           correlate_pairs over all 2,000 counters at 15 s buckets (the 40,320 x 2,000 matrix),
                       spearman (the default), top 50
  ours-pairs-pearson   the same with pearson
  blas                 numpy X.T @ X on a random float64 matrix of the same shape (OpenBLAS; best of 2)

Fairness: ours and the references must give the same r (to 1e-9) for every counter: Pearson against
DuckDB corr(), Spearman against pandas rank() + corrwith (the fixture has no missing samples).
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
ALTERNATIVES = ("ours-pearson", "duckdb-pearson", "pandas-pearson",
                "ours-spearman", "duckdb-spearman", "pandas-spearman",
                "ours-spearman-lag10", "ours-pearson-lag10",
                "ours-pairs", "ours-pairs-pearson", "blas")
TOLERANCE = 1e-9
LAG = 10
PAIRS_BUCKET = "15s"
PAIRS_TOP = 50


# -- children ------------------------------------------------------------------------------------

def _ours_target(job: dict, profile: str | None, method: str, max_lag: int) -> dict:
    from warehouse.correlate import CorrelateRequest, correlate_target
    from warehouse.home import open_warehouse

    def run() -> dict:
        with open_warehouse(job["home"]) as wh:
            return correlate_target(wh, CorrelateRequest(target=job["target"], method=method, max_lag=max_lag,
                                                         rhythm="keep", top=1_000_000))

    res = fx.profile_call(run, profile)
    return {"r": {row["key"]: row["r"] for row in res["results"]},
            "lag": {row["key"]: row["lag"] for row in res["results"]},
            "tested": res["tested"], "skipped": res["skipped"]}


def _ours_pairs(job: dict, profile: str | None, method: str) -> dict:
    from warehouse.correlate import CorrelateRequest, correlate_pairs
    from warehouse.home import open_warehouse

    def run() -> dict:
        with open_warehouse(job["home"]) as wh:
            return correlate_pairs(wh, CorrelateRequest(target=None, pairs=True, method=method, bucket=PAIRS_BUCKET,
                                                        top=PAIRS_TOP))

    res = fx.profile_call(run, profile)
    return {"pairs": [[p["a"], p["b"], p["r"], p["n"]] for p in res["pairs"]], "tested": res["tested"],
            "counters": res["counters"]}


def _parquet_list(files: list[str]) -> str:
    return "[" + ", ".join("'" + f.replace("'", "''") + "'" for f in files) + "]"


def _duckdb(job: dict, profile: str | None, ranked: bool) -> dict:
    import duckdb

    con = duckdb.connect()
    con.execute(f"SET temp_directory = '{job['work']}/duckdb-tmp'")
    target = int(job["target_id"])
    values = ("rank() OVER (PARTITION BY counter_id ORDER BY v)"
              " + (count(*) OVER (PARTITION BY counter_id, v) - 1) / 2.0" if ranked else "v")
    sql = f"""
        WITH b AS (
            SELECT counter_id, epoch_us(ts) // 60000000 AS k, avg(value) AS v
            FROM read_parquet({_parquet_list(job['files'])})
            GROUP BY ALL),
        s AS (SELECT counter_id, k, {values} AS x FROM b),
        t AS (SELECT k, x AS y FROM s WHERE counter_id = {target})
        SELECT s.counter_id, corr(s.x, t.y) AS r, count(*) AS n
        FROM s JOIN t USING (k)
        WHERE s.counter_id <> {target}
        GROUP BY s.counter_id"""
    rows = fx.profile_call(lambda: con.execute(sql).fetchall(), profile)
    con.close()
    return {"r": {str(cid): r for cid, r, _ in rows}, "n_min": min(n for *_, n in rows)}


def _pandas(job: dict, profile: str | None, ranked: bool) -> dict:
    import pandas as pd

    def run() -> dict:
        df = pd.read_parquet(job["files"], columns=["ts", "counter_id", "value"])
        df["bucket"] = df["ts"].dt.floor("60s")
        wide = df.groupby(["bucket", "counter_id"])["value"].mean().unstack("counter_id")
        del df
        if ranked:
            wide = wide.rank()
        y = wide.pop(int(job["target_id"]))
        r = wide.corrwith(y)
        return {"r": {str(cid): float(v) for cid, v in r.items()}}

    return fx.profile_call(run, profile)


def _blas(job: dict, profile: str | None) -> dict:
    import numpy as np

    rows, cols = job["pairs_shape"]
    X = np.random.default_rng(1).standard_normal((rows, cols))
    best = math.inf
    for _ in range(2):
        t0 = time.perf_counter()
        G = X.T @ X
        best = min(best, time.perf_counter() - t0)
        del G
    return {"matmul_s": best, "shape": [rows, cols]}


CHILDREN = {
    "ours-pearson": lambda job, prof: _ours_target(job, prof, "pearson", 0),
    "ours-spearman": lambda job, prof: _ours_target(job, prof, "spearman", 0),
    "ours-pearson-lag10": lambda job, prof: _ours_target(job, prof, "pearson", LAG),
    "ours-spearman-lag10": lambda job, prof: _ours_target(job, prof, "spearman", LAG),
    "duckdb-pearson": lambda job, prof: _duckdb(job, prof, ranked=False),
    "duckdb-spearman": lambda job, prof: _duckdb(job, prof, ranked=True),
    "pandas-pearson": lambda job, prof: _pandas(job, prof, ranked=False),
    "pandas-spearman": lambda job, prof: _pandas(job, prof, ranked=True),
    "ours-pairs": lambda job, prof: _ours_pairs(job, prof, "spearman"),
    "ours-pairs-pearson": lambda job, prof: _ours_pairs(job, prof, "pearson"),
    "blas": _blas,
}


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    fx.preload(args.child)
    t0 = time.perf_counter()
    info = CHILDREN[args.child](job, args.profile)
    info["work_s"] = time.perf_counter() - t0
    Path(args.result).write_text(json.dumps(info))


# -- parent --------------------------------------------------------------------------------------

def by_id(info: dict, key_to_id: dict[str, int]) -> dict[int, float]:
    """r per counter id, whether the child answered with keys (ours) or ids (the references)."""
    out = {}
    for k, v in info.get("r", {}).items():
        out[key_to_id[k] if k in key_to_id else int(k)] = v
    return out


def max_diff(a: dict[int, float], b: dict[int, float]) -> tuple[float, int, int]:
    """Largest |r_a - r_b| over the counters both have, how many they share, how many only one has."""
    common = a.keys() & b.keys()
    worst = max((abs(a[i] - b[i]) for i in common), default=math.nan)
    return worst, len(common), len(a.keys() ^ b.keys())


def report(job: dict, runs: dict[str, fx.Measured], key_to_id: dict[str, int]) -> None:
    print()
    print(f"data: {job['counters']:,} counters, {job['points']:,} points, {job['buckets']:,} one-minute buckets;"
          f" target {job['target']} (id {job['target_id']}); pairs matrix {job['pairs_shape'][0]:,} x"
          f" {job['pairs_shape'][1]:,} at {PAIRS_BUCKET}")
    head = (f"{'alternative':<20} {'wall s':>7} {'slowest':>7} {'work s':>7} {'cpu s':>7} {'peak MiB':>9} {'load':>5}"
            f"  {'work vs ours':>13}  note")
    print(head)
    print("-" * (len(head) + 30))
    ours_for = {"pearson": "ours-pearson", "spearman": "ours-spearman"}
    for name in ALTERNATIVES:
        r = runs.get(name)
        if r is None:
            continue
        if r.error:
            print(f"{name:<20} failed: {r.error}")
            continue
        base = None
        for method, ours in ours_for.items():
            if method in name and name != ours and "lag" not in name and "pairs" not in name:
                base = runs.get(ours)
        if name.endswith("-lag10"):
            base = runs.get(name[: -len("-lag10")])
        if name == "blas":
            base = runs.get("ours-pairs-pearson")
        vs = f"{fx.ratio(r.work, base.work):.2f}x" if base and not base.error else ""
        note = ""
        if name == "blas":
            note = f"X.T @ X alone: {r.info['matmul_s']:.2f} s"
        elif "pairs" in name:
            top = r.info["pairs"][0]
            note = f"{r.info['tested']:,} pairs tested; top {top[0]} ~ {top[1]} r={top[2]:+.3f}"
        elif "lag" in r.info:
            lead = job["leader"]
            note = f"leader {lead}: lag {r.info['lag'].get(lead)}, r={r.info['r'].get(lead, math.nan):+.3f}"
        print(f"{name:<20} {r.wall:7.2f} {r.spread:>7} {fx.fmt(r.work):>7} {r.cpu:7.2f} {r.peak_mib:9.0f} {r.load:5.2f}  {vs:>13}  {note}")
    print("wall: the whole child (start-up, imports, work), fastest of the rounds; slowest: the slowest round; work: inside the child after imports; cpu: user + system"
          " seconds of the child, all threads;")
    print("load: 1-min load average at its start (other work shares the machine);")
    print("work vs ours: this row's work time over ours with the same method (for lag10: over lag 0;"
          " for blas: over ours-pairs-pearson).")

    print()
    print("agreement of r over every counter (max |difference|, counters compared):")
    checks = [("ours-pearson", "duckdb-pearson", True), ("ours-pearson", "pandas-pearson", False),
              ("ours-spearman", "pandas-spearman", True), ("ours-spearman", "duckdb-spearman", False)]
    fair: dict[str, bool] = {}
    for a, b, required in checks:
        ra, rb = runs.get(a), runs.get(b)
        if not ra or not rb or ra.error or rb.error:
            continue
        worst, n, odd = max_diff(by_id(ra.info, key_to_id), by_id(rb.info, key_to_id))
        ok = worst <= TOLERANCE and odd == 0 and n == job["counters"] - 1
        fair[f"{a}|{b}"] = ok
        print(f"  {a} vs {b}: {worst:.1e} over {n:,} counters" + (f", {odd} in only one" if odd else "")
              + ("" if required else " (information)"))
        if required:
            fx.goal(f"{a} and {b} give the same r to {TOLERANCE:g}", ok)

    print()
    print("goals (judged on work time; the wall-time verdict is shown beside it):")

    def speed(a: str, b: str) -> tuple[float, float] | None:
        ra, rb = runs.get(a), runs.get(b)
        if not ra or not rb or ra.error or rb.error:
            return None
        return fx.ratio(rb.work, ra.work), fx.ratio(rb.wall, ra.wall)

    def speed_goal(a: str, b: str, factor: float, text: str) -> None:
        s = speed(a, b)
        if s is None:
            return
        wall_ok = "met" if s[1] >= factor else "missed"
        fx.goal(f"{text}: {s[0]:.2f}x by work, {s[1]:.2f}x by wall (wall: {wall_ok})", s[0] >= factor)

    speed_goal("ours-pearson", "duckdb-pearson", 1.0, "pearson: ours at least as fast as DuckDB corr() [1.7 s, 0.1 GB]")
    speed_goal("ours-pearson", "pandas-pearson", 5.0, "pearson: ours >= 5x pandas pivot + corrwith")
    speed_goal("ours-spearman", "duckdb-spearman", 5.0, "spearman: ours >= 5x DuckDB rank() windows [36-50 s, 5.4 GB]")
    speed_goal("ours-spearman", "pandas-spearman", 3.0, "spearman: ours >= 3x pandas rank() + corrwith [23 s, 3.4 GB]")
    sp = runs.get("ours-spearman")
    if sp and not sp.error:
        fx.goal(f"spearman: ours peak memory < 1 GiB: {sp.peak_mib:.0f} MiB", sp.peak_mib < 1024)
    for method in ("spearman", "pearson"):
        one, many = runs.get(f"ours-{method}"), runs.get(f"ours-{method}-lag10")
        if one and many and not one.error and not many.error:
            c, w = fx.ratio(many.work, one.work), fx.ratio(many.wall, one.wall)
            fx.goal(f"{method}: --max-lag {LAG} costs <= 3x a single lag: {c:.2f}x by work, {w:.2f}x by wall"
                    f" (wall: {'met' if w <= 3 else 'missed'})", c <= 3)
    blas = runs.get("blas")
    for name in ("ours-pairs", "ours-pairs-pearson"):
        p = runs.get(name)
        if p and blas and not p.error and not blas.error:
            mm = float(blas.info["matmul_s"])
            fx.goal(f"{name}: within 2x of numpy BLAS X.T @ X ({mm:.2f} s): ours {p.work:.2f} s work,"
                    f" {p.wall:.2f} s wall = {p.work / mm:.2f}x / {p.wall / mm:.2f}x", p.work <= 2 * mm)
    if fair and not all(fair.values()):
        print("NOTE: a required agreement check failed, so the corresponding speed comparison is not like for like.")


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="about a tenth of the size (0.7 days)")
    ap.add_argument("--only", default=",".join(ALTERNATIVES), help=f"subset of {', '.join(ALTERNATIVES)}")
    ap.add_argument("--skip", default="", help="alternatives to leave out")
    ap.add_argument("--repeat", type=int, default=1,
                    help="rounds over all alternatives; each one's fastest wall is shown (with its work, cpu)")
    ap.add_argument("--profile", type=Path, help="folder for a cProfile dump of each child (NAME.prof)")
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
    out = args.out.resolve()
    spec = fx.week(args.quick)
    home = fx.ensure(spec, out)
    target = spec.key(spec.target)
    facts = fx.catalog_facts(home, {"target": target})
    key_to_id = {k: i for i, k in facts["keys"].items()}
    stamp = json.loads((home / "fixture.json").read_text())
    work = Path(tempfile.mkdtemp(prefix="correlate-", dir=out))
    job = {"home": str(home), "files": facts["files"], "target": target, "target_id": facts["ids"]["target"][0],
           "leader": spec.key(spec.leader), "partner": spec.key(spec.partner), "work": str(work),
           "counters": spec.counters, "points": stamp["points"], "buckets": spec.rows * spec.interval // 60,
           "pairs_shape": [spec.rows, spec.counters]}
    job_path = work / "job.json"
    job_path.write_text(json.dumps(job))
    if args.profile:
        args.profile.mkdir(parents=True, exist_ok=True)
    fx.warm(facts["files"])
    runs: dict[str, fx.Measured] = {}
    rounds = max(1, args.repeat)
    for i in range(rounds):             # rounds, so that drifting load on the machine hits every alternative
        for name in ALTERNATIVES:
            if name not in names or name in skip:
                continue
            print(f"running {name}" + (f" (round {i + 1}/{rounds})" if rounds > 1 else ""), flush=True)
            cmd = fx.child_command(SCRIPT, name, job_path, work / f"{name}.json")
            if args.profile:
                cmd += ["--profile", str(args.profile.resolve() / f"{name}.prof")]
            run = fx.run_child(name, cmd, work / f"{name}.json")
            print(f"  {run.wall:.2f} s wall, {fx.fmt(run.work)} s work, {run.cpu:.2f} s cpu, peak {run.peak_mib:.0f} MiB,"
                  f" load {run.load:.2f} {run.error}", flush=True)
            fx.keep_best(runs, run)
    report(job, runs, key_to_id)
    for f in sorted(work.rglob("*"), reverse=True):
        f.rmdir() if f.is_dir() else f.unlink()
    work.rmdir()
    print()
    print(fx.machine_note())


if __name__ == "__main__":
    main()
