"""Report benchmark: how long a handed-over report of the small demo warehouse takes, and what the
figures and the HTML add to the analyses themselves.

Usage (from the project root, in the venv):

    python bench/report.py                 # every alternative once
    python bench/report.py --repeat 3      # best of three per alternative
    python bench/report.py --only analyses,cli-report

Data: the invented demo scenario at small scale (seed/generate.py: 86 counters x 4 weeks at 60 s,
3.46 M points), built once through our own ingest, rolled up by week, and cached under bench/out/
with a stamp (the seed's files are regenerated only when the stamp changes).

Alternatives, each in its own child process (wall: the whole child, start-up and imports included;
work: the timed part inside it; peak: its own maximum resident set size):
  analyses     the report's seven analyses (size and patterns of the storage IO/s summed on busiest
               hours, suspects of the read latency with lags, patterns of the write latency, the
               weekly trend, the weeks before and after the rollout, what changed) with no figure:
               the floor.
  report       the same through warehouse.report.write_report: figures drawn, PNGs inlined, HTML written.
  report-pdf   the same with --pdf as well.
  cli-report   `warehouse report ...` with the same options: what a user waits for.
  demo-story   warehouse.demo.tell_story on the loaded warehouse: the demo's own nine-section report
               (the rollup is already current, so it checks and moves on).

The goal (issue 8): report generation over the small demo in under a minute on 2 cores. This is
a measuring tool, not a test: nothing asserts; goals are printed as met or missed.
"""
from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import warehouse_fixture as fx  # noqa: E402

SCRIPT = Path(__file__).resolve()
ALTERNATIVES = ("analyses", "report", "report-pdf", "cli-report", "demo-story")
DEMO_VERSION = 1
GOAL_S = 60.0
STORAGE = "san01/pool=*/*_iops"
OPTIONS = ["--combine", "sum", "--window", "busiest-hours", "--days", "mon-fri",
           "--suspects", "san01/pool=vdi/read_latency_ms", "--max-lag", "5",
           "--patterns", "san01/pool=vdi/write_latency_ms", "--max-period", "2h",
           "--trend", "san01/pool=vdi/read_iops", "--capacity", "15000",
           "--before", "2026-W11", "--after", "2026-W12", "--changes", "2026-W12"]


def plan():
    """The ReportPlan the CLI builds from OPTIONS (trend per counter, from the weekly rollup)."""
    from warehouse.report import ReportPlan

    return ReportPlan(selectors=(STORAGE,), combine="sum", window="busiest-hours", days="mon-fri",
                      suspects=("san01/pool=vdi/read_latency_ms",), max_lag=5,
                      pattern_selectors=("san01/pool=vdi/write_latency_ms",), max_period="2h",
                      trend_selectors=("san01/pool=vdi/read_iops",), capacity=15000.0,
                      before="2026-W11", after="2026-W12", changes_period="2026-W12")


def ensure_demo(out: Path = fx.OUT) -> Path:
    """The small demo warehouse, loaded and rolled up by week, cached with a stamp."""
    home = out / f"demo-small-v{DEMO_VERSION}"
    stamp_path = home / "fixture.json"
    if stamp_path.exists():
        print(f"fixture: reusing {home}", flush=True)
        return home
    from seed.generate import generate
    from warehouse.demo import DEMO_SOURCE, DEMO_ZONE
    from warehouse.home import init_home
    from warehouse.ingest.run import IngestOptions, ingest_files
    from warehouse.rollup import RollupRequest, rollup

    shutil.rmtree(home, ignore_errors=True)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    init_home(home, zone=DEMO_ZONE)
    with tempfile.TemporaryDirectory(dir=out) as tmp:
        files = generate(Path(tmp), scale="small")
        for machine in sorted({f.parent for f in files}):
            ingest_files(home, [f for f in files if f.parent == machine],
                         IngestOptions(source=DEMO_SOURCE, host=machine.name))
    rollup(home, RollupRequest(("week",), "all"))
    stamp_path.write_text(json.dumps({"version": DEMO_VERSION, "built_s": round(time.perf_counter() - t0, 1),
                                      "built_with": fx.code_note()}))
    print(f"fixture: built {home} in {time.perf_counter() - t0:.0f} s", flush=True)
    return home


# -- children ------------------------------------------------------------------------------------

def child_analyses(job: dict) -> dict:
    from warehouse.changes import ChangesRequest, find_changes
    from warehouse.compare import CompareRequest, compare_periods
    from warehouse.correlate import CorrelateRequest, correlate_target
    from warehouse.home import open_warehouse
    from warehouse.patterns import PatternRequest, find_patterns
    from warehouse.sizing import SizeRequest, size_selector
    from warehouse.trend import TrendRequest, trend

    run = {SizeRequest: size_selector, CorrelateRequest: correlate_target, PatternRequest: find_patterns,
           TrendRequest: trend, CompareRequest: compare_periods, ChangesRequest: find_changes}
    requests = plan().request().analyses
    t0 = time.perf_counter()
    with open_warehouse(job["home"]) as wh:
        for req in requests:
            run[type(req)](wh, req)
    return {"work_s": time.perf_counter() - t0, "sections": len(requests)}


def child_report(job: dict, pdf: bool) -> dict:
    from warehouse.home import open_warehouse
    from warehouse.report import write_report

    out = Path(job["work"]) / "report.html"
    t0 = time.perf_counter()
    with open_warehouse(job["home"]) as wh:
        written = write_report(wh, plan().request(), out, out.with_suffix(".pdf") if pdf else None)
    return {"work_s": time.perf_counter() - t0, "sections": len(written["sections"]), "bytes": written["bytes"]}


def child_story(job: dict) -> dict:
    from warehouse.demo import tell_story

    out = Path(job["work"]) / "story.html"
    t0 = time.perf_counter()
    for _ in tell_story(Path(job["home"]), out):
        pass
    html = out.read_text(encoding="utf-8")
    return {"work_s": time.perf_counter() - t0, "sections": html.count("<section id=") - 2, "bytes": len(html)}


def child_main(args: argparse.Namespace) -> None:
    job = json.loads(Path(args.job).read_text())
    fx.preload("ours")
    if args.child == "analyses":
        info = child_analyses(job)
    elif args.child == "demo-story":
        info = child_story(job)
    else:
        info = child_report(job, pdf=args.child == "report-pdf")
    Path(args.result).write_text(json.dumps(info))


def cli_command(job: dict) -> list[str]:
    warehouse = shutil.which("warehouse") or "warehouse"
    return [warehouse, "--home", job["home"], "report", STORAGE, *OPTIONS,
            "--out", str(Path(job["work"]) / "cli.html"), "--format", "json"]


# -- parent --------------------------------------------------------------------------------------

def show(runs: dict[str, fx.Measured]) -> None:
    print(f"\n  {'alternative':12s} {'wall s':>8s} {'work s':>8s} {'cpu s':>7s} {'peak MiB':>9s} {'slowest':>8s}  result")
    for name, m in runs.items():
        shown = {k: len(v) if isinstance(v, list) else v for k, v in m.info.items()
                 if k not in ("work_s", "out", "pdf")} if not m.error else m.error
        print(f"  {name:12s} {m.wall:8.2f} {fx.fmt(m.work):>8s} {m.cpu:7.2f} {m.peak_mib:9.0f} {m.spread:>8s}  {shown}")
    base = runs.get("analyses")
    if base and not base.error:
        for name in ("report", "report-pdf", "demo-story"):
            if name in runs and not runs[name].error:
                print(f"  {name} / analyses work: {fx.ratio(runs[name].work, base.work):.2f}x")
    if "cli-report" in runs:
        m = runs["cli-report"]
        fx.goal(f"`warehouse report` over the small demo in under {GOAL_S:.0f} s wall ({m.wall:.1f} s)",
                None if m.error else m.wall < GOAL_S)
    if "demo-story" in runs:
        m = runs["demo-story"]
        fx.goal(f"the demo's story and its report in under {GOAL_S:.0f} s of work ({fx.fmt(m.work, '.1f')} s)",
                None if m.error else m.work < GOAL_S)


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--only", default=",".join(ALTERNATIVES), help="comma-separated subset of the alternatives")
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
    names = fx.pick(args.only, ALTERNATIVES)
    home = ensure_demo()
    work = Path(tempfile.mkdtemp(prefix="report-", dir=fx.OUT))
    job = {"home": str(home), "work": str(work)}
    job_path = work / "job.json"
    job_path.write_text(json.dumps(job))
    fx.warm([str(p) for p in (home / "points").rglob("*.parquet")])
    runs: dict[str, fx.Measured] = {}
    for _ in range(max(1, args.repeat)):
        for name in names:
            print(f"running {name}", flush=True)
            result = work / f"{name}.json"
            cmd = cli_command(job) if name == "cli-report" else fx.child_command(SCRIPT, name, job_path, result)
            fx.keep_best(runs, fx.run_child(name, cmd, result, stdout_to_result=name == "cli-report"))
    show(runs)
    shutil.rmtree(work, ignore_errors=True)
    print()
    print(fx.machine_note())


if __name__ == "__main__":
    main()
