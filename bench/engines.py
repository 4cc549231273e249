"""Engines benchmark: the DuckDB engine against the Spark engine (local mode) on the same warehouses.

Usage (from the project root, in the venv with the [spark] extra and Java):

    python bench/engines.py                 # tiny (1.2 M points) and small (8.1 M points) warehouses
    python bench/engines.py --medium        # also the 80.6 M-point week (minutes per Spark run)
    python bench/engines.py --only rollup,size --master 'local[2]'

Data (invented): bench/warehouse_fixture.py's per-host counters at 15 s, built once through our own
ingest and cached under bench/out/ (the small and medium ones are the size and correlate
benchmarks' week fixtures, --quick and full): tiny 4 hosts x 50 counters x 1 day; small 40 x 50 x
0.7 days; medium 40 x 50 x 7 days. Rollups run on a clone (catalog copied, Parquet hard-linked).

Each (warehouse, question, engine) runs in its own child process, through warehouse.engine as the
CLI calls it: the child's wall time includes interpreter start-up, imports and, for Spark, starting
the JVM and the session; "work" is the question alone. Peak memory is the child's own maximum
resident set size and, for Spark, the JVM's (VmHWM of the gateway process, read before it stops).
Questions:
  rollup     rollup --all --period week (writes the rows; both engines write the same rows)
  size       size 'host*/vol00_iops' --combine sum (every host's first volume, one combined series)
  correlate  correlate host01/vol00_latency_ms --against 'host*/*' --max-lag 2 (every counter)

The crossover: where Spark's fixed start-up cost is paid back. Per question, wall = a + b * points is
fitted to each engine's runs (least squares over the sizes run) and the point count where the lines
meet is printed, when Spark's slope is the smaller; otherwise DuckDB is the better choice at every
size on this machine. Spark in local mode shares the same cores as DuckDB: the slope it gains on a
cluster comes from more executors, which this benchmark cannot show.

This is a measuring tool, not a test: nothing here asserts.
"""
from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402
from rollup import clone  # noqa: E402

SCRIPT = Path(__file__).resolve()
QUESTIONS = ("rollup", "size", "correlate")
ENGINES = ("duckdb", "spark")


def specs(medium: bool) -> list[fx.Spec]:
    tiny = fx.Spec("week", 4, fx.HOST_COLUMNS, 1.0)
    return [tiny, fx.week(quick=True)] + ([fx.week()] if medium else [])


# -- children ------------------------------------------------------------------------------------

def _jvm_peak_mib(session: object) -> float:
    """VmHWM of the Spark JVM (the py4j gateway process), in MiB; NaN when it cannot be read."""
    try:
        pid = session.sparkContext._gateway.proc.pid          # type: ignore[attr-defined]
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except (AttributeError, OSError, ValueError):
        pass
    return math.nan


def child_question(job: dict, question: str, engine_name: str) -> dict:
    from warehouse import engine as engines
    from warehouse.correlate import CorrelateRequest
    from warehouse.home import open_warehouse
    from warehouse.rollup import RollupRequest
    from warehouse.sizing import SizeRequest

    engine = engines.Engine(engine_name, job["master"])
    t0 = time.perf_counter()
    session = engine.session() if engine.spark else None
    start_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    home = Path(job["home"])
    if question == "rollup":
        (summary,) = engines.rollup(home, RollupRequest(("week",), "all"), engine)
        answer = {"rows": summary["rows"]}
    elif question == "size":
        with open_warehouse(home) as wh:
            result = engines.size(wh, SizeRequest("host*/vol00_iops", combine="sum"), engine)
        answer = {k: result[k] for k in ("n", "mean", "bound", "p99")}
    else:
        with open_warehouse(home) as wh:
            result = engines.correlate(wh, CorrelateRequest(job["target"], against="host*/*", max_lag=2, top=5), engine)
        answer = {"tested": result["tested"], "top": [(r["key"], r["r"], r["lag"]) for r in result["results"]]}
    info = {"answer": answer, "work_s": time.perf_counter() - t0, "start_s": start_s}
    if session is not None:
        info["jvm_peak_mib"] = _jvm_peak_mib(session)
        session.stop()
    return info


CHILDREN = {f"{e}-{q}": (q, e) for q in QUESTIONS for e in ENGINES}


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    question, engine = CHILDREN[args.child]
    info = child_question(job, question, engine)
    Path(args.result).write_text(json.dumps(info))


# -- parent --------------------------------------------------------------------------------------

def points_of(home: Path) -> int:
    return int(json.loads((home / "fixture.json").read_text())["points"])


def crossover(walls: dict[str, list[tuple[int, float]]]) -> str:
    """Where the fitted lines wall = a + b * points of the two engines meet, in words."""
    fits = {}
    for engine, runs in walls.items():
        if len(runs) < 2:
            return "needs two sizes"
        x = [p for p, _ in runs]
        y = [w for _, w in runs]
        mx, my = sum(x) / len(x), sum(y) / len(y)
        b = sum((a - mx) * (c - my) for a, c in zip(x, y)) / sum((a - mx) ** 2 for a in x)
        fits[engine] = (my - b * mx, b)
    (ad, bd), (asp, bsp) = fits["duckdb"], fits["spark"]
    line = (f"duckdb {ad:.1f} s + {bd * 1e6:.3f} s/M points; spark {asp:.1f} s + {bsp * 1e6:.3f} s/M points")
    if bsp >= bd:
        return line + ": Spark's slope is not smaller here, DuckDB is the better choice at every size on this machine"
    return line + f": lines meet near {(asp - ad) / (bd - bsp) / 1e6:,.0f} M points"


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--medium", action="store_true", help="also the 80.6 M-point week (slow with Spark)")
    ap.add_argument("--only", default=",".join(QUESTIONS), help=f"subset of {', '.join(QUESTIONS)}")
    ap.add_argument("--master", default="local[*]", help="Spark master for the spark runs (default local[*])")
    fx.child_options(ap, CHILDREN)
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        child_main(args)
        return
    questions = fx.pick(args.only, QUESTIONS, "question")
    print(fx.machine_note())
    print(fx.code_note())
    out = args.out.resolve()
    table: list[tuple[str, int, str, str, fx.Measured]] = []
    walls: dict[str, dict[str, list[tuple[int, float]]]] = {q: {e: [] for e in ENGINES} for q in questions}
    for spec in specs(args.medium):
        cached = fx.ensure(spec, out)
        work = out / f"engines-work-{spec.slug()}"
        home = clone(cached, work / "wh")
        (home / "fixture.json").write_text((cached / "fixture.json").read_text())
        points = points_of(home)
        fx.warm([str(f) for f in (home / "points").rglob("*.parquet")])
        job = work / "job.json"
        job.write_text(json.dumps({"home": str(home), "master": args.master, "target": spec.key(spec.target)}))
        for question in questions:
            for engine in ENGINES:
                name = f"{engine}-{question}"
                print(f"running {name} on {spec.slug()} ({points:,} points)", flush=True)
                run = fx.run_child(name, fx.child_command(SCRIPT, name, job, work / f"{name}.json"), work / f"{name}.json")
                print(f"  {run.wall:.1f} s wall, peak {run.peak_mib:.0f} MiB {run.error}", flush=True)
                table.append((spec.slug(), points, question, engine, run))
                if not run.error:
                    walls[question][engine].append((points, run.wall))
    print()
    head = (f"{'warehouse':<34} {'question':<10} {'engine':<7} {'wall s':>7} {'start s':>7} {'work s':>7}"
            f" {'peak MiB':>8} {'JVM MiB':>8} {'spark/duckdb':>12}")
    print(head)
    print("-" * len(head))
    by_key = {(w, q, e): r for w, _, q, e, r in table}
    for slug, _, question, engine, run in table:
        if run.error:
            print(f"{slug:<34} {question:<10} {engine:<7} failed: {run.error}")
            continue
        duck = by_key.get((slug, question, "duckdb"))
        vs = fx.fmt(fx.ratio(run.wall, duck.wall) if duck and not duck.error else math.nan) + "x"
        print(f"{slug:<34} {question:<10} {engine:<7} {run.wall:7.1f} {fx.fmt(run.info.get('start_s', math.nan), '.1f'):>7}"
              f" {fx.fmt(run.work, '.1f'):>7} {run.peak_mib:8.0f} {fx.fmt(run.info.get('jvm_peak_mib', math.nan), '.0f'):>8}"
              f" {vs if engine == 'spark' else '':>12}")
    print("wall: the whole child (start-up, imports, the session, the question); start: starting Spark;"
          " work: the question alone")
    for slug, _, question, engine, run in table:
        if engine == "spark" and not run.error:
            duck = by_key.get((slug, question, "duckdb"))
            if duck and not duck.error and duck.info["answer"] != run.info["answer"]:
                same = _close(duck.info["answer"], run.info["answer"])
                print(f"  answers of {question} on {slug}: {'equal to 1e-9' if same else 'DIFFER'}")
    print()
    print("crossover (wall = a + b * points, fitted per engine):")
    for question in questions:
        print(f"  {question:<10} {crossover(walls[question])}")
    print()
    print(fx.machine_note())


def _close(a: object, b: object) -> bool:
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_close(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_close(x, y) for x, y in zip(a, b))
    if isinstance(a, float) and isinstance(b, float):
        return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-300)
    return a == b


if __name__ == "__main__":
    main()
