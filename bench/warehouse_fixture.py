"""Shared pieces of the query benchmarks (bench/size.py, bench/correlate.py).

* An invented warehouse of per-host counters, built once through our own ingest (a wide CSV per
  host is generated chunk by chunk, loaded with `ingest_files`, then deleted) and cached under
  bench/out/ with a stamp of its parameters; a changed parameter rebuilds it.
* A child-process runner: every alternative runs in its own interpreter, so its wall time includes
  start-up and imports and its peak resident set size (from os.wait4) is its own.
* Small printing helpers.

The values are invented: a daily rhythm (damped at weekends) plus noise per counter, whole numbers
or quarters / eighths (see Family.places). One counter is the symptom ("target"); one other
counter shares its bursts at the same time ("partner") and one shares them three minutes earlier
("leader"), so the correlation benchmarks have something to find.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

# Imported before NumPy anywhere: on a processor where `warehouse` chooses NumPy's sort code
# (warehouse/_cpu.py), this process and every child it starts (ours and the alternatives alike)
# run with the same choice, through the inherited environment.
import warehouse  # noqa: E402,F401

HERE = Path(__file__).resolve().parent
OUT = HERE / "out"
FIXTURE_VERSION = 4  # 3: row groups of 32 Ki rows; 4: delta-encoded times, LZ4
START = "2026-03-02T00:00:00"           # a Monday, UTC
CHUNK_ROWS = 8192
SOURCE = "bench"


@dataclass(frozen=True)
class Family:
    """`count` columns named pattern.format(i): baseline, daily swing, noise sd, clip range, and
    `places`: 0 writes whole numbers, p > 0 multiples of 2**-p (0.25 or 0.125: two or three decimals).

    Binary fractions keep every bucket mean exact in floating point whatever order its samples are
    summed in, so a reference implementation sees exactly the same bucket means as ours, and the
    same ties for the ranks; with arbitrary decimals two engines' means can differ in the last bit
    and break or make ties differently.
    """

    pattern: str
    count: int
    base: float
    swing: float
    noise: float
    low: float = 0.0
    high: float = math.inf
    places: int = 0

    def names(self) -> list[str]:
        return [self.pattern.format(i) for i in range(self.count)] if "{" in self.pattern else [self.pattern]


# Fifty columns per host.
HOST_COLUMNS: tuple[Family, ...] = (
    Family("vol{:02d}_iops", 13, 800.0, 500.0, 150.0),
    Family("vol{:02d}_latency_ms", 13, 3.0, 1.5, 0.8, 0.125, math.inf, 3),
    Family("cpu{}_busy_pct", 8, 35.0, 25.0, 6.0, 0.0, 100.0, 2),
    Family("net{}_in_kbps", 4, 30_000.0, 20_000.0, 8_000.0),
    Family("net{}_out_kbps", 4, 20_000.0, 15_000.0, 6_000.0),
    Family("mem_used_mb", 1, 12_000.0, 3_000.0, 400.0),
    Family("mem_free_pct", 1, 40.0, 12.0, 3.0, 0.0, 100.0, 2),
    Family("swap_used_pct", 1, 3.0, 1.0, 0.8, 0.0, 100.0, 2),
    Family("run_queue", 1, 3.0, 2.0, 1.5),
    Family("ctx_switches_per_sec", 1, 20_000.0, 8_000.0, 3_000.0),
    Family("page_faults_per_sec", 1, 1_500.0, 900.0, 400.0),
    Family("tcp_conns", 1, 400.0, 250.0, 40.0),
    Family("proc_count", 1, 180.0, 10.0, 3.0),
)
VOLUME_IOPS: tuple[Family, ...] = (HOST_COLUMNS[0],)


@dataclass(frozen=True)
class Spec:
    """What to build. Planted series are (host index, column name); lead is in samples."""

    name: str
    hosts: int
    families: tuple[Family, ...]
    days: float
    interval: int = 15
    seed: int = 11
    target: tuple[int, str] | None = (1, "vol00_latency_ms")
    partner: tuple[int, str] | None = (29, "cpu3_busy_pct")
    leader: tuple[int, str] | None = (17, "net2_in_kbps")
    lead_samples: int = 12
    version: int = field(default=FIXTURE_VERSION)

    @property
    def rows(self) -> int:
        return int(round(self.days * 86_400 / self.interval))

    @property
    def columns(self) -> list[str]:
        return [n for f in self.families for n in f.names()]

    @property
    def counters(self) -> int:
        return self.hosts * len(self.columns)

    def host(self, h: int) -> str:
        return f"host{h:02d}"

    def key(self, planted: tuple[int, str]) -> str:
        return f"{self.host(planted[0])}/{planted[1]}"

    def slug(self) -> str:
        return f"{self.name}-{self.hosts}h{len(self.columns)}c-{self.days:g}d-{self.interval}s-seed{self.seed}"

    def stamp(self) -> dict[str, object]:
        d = asdict(self)
        d["families"] = [asdict(f) for f in self.families]
        return json.loads(json.dumps(d))     # tuples -> lists, inf -> Infinity, as read back


def week(quick: bool = False) -> Spec:
    """2,000 counters (40 hosts x 50) for a week at 15 s: 80.6 M points; --quick: 0.7 days."""
    return Spec("week", 40, HOST_COLUMNS, 0.7 if quick else 7.0)


def month_volumes(quick: bool = False) -> Spec:
    """520 counters (40 hosts x 13 volume IOPS) for 30 days at 15 s: 89.9 M points; --quick: 3 days."""
    return Spec("volumes", 40, VOLUME_IOPS, 3.0 if quick else 30.0, target=None, partner=None, leader=None)


# -- generation ------------------------------------------------------------------------------------

def _latent(spec: Spec):
    """The shared burst process (unit sd, slow AR(1)), long enough for the leader's shift."""
    import numpy as np
    from scipy.signal import lfilter

    rng = np.random.default_rng([spec.seed, 999])
    n = spec.rows + spec.lead_samples
    phi = 0.995
    z = lfilter([1.0], [1.0, -phi], rng.standard_normal(n))
    z = np.maximum(z / z.std() - 0.5, 0.0)          # bursts above a floor, like queueing spikes
    return z / z.std()


def write_host_csv(spec: Spec, h: int, path: Path, latent, *, first_row: int = 0, count: int | None = None,
                   chunk_rows: int = CHUNK_ROWS) -> int:
    """Stream one host's wide CSV in chunks of rows; returns the number of values written.

    `first_row` and `count` write one slice of the time range (a collector's daily file, say);
    `chunk_rows` bounds memory for very wide hosts (a chunk holds chunk_rows x columns values)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pacsv

    rng = np.random.default_rng([spec.seed, h] + ([first_row] if first_row else []))
    end = spec.rows if count is None else min(spec.rows, first_row + count)
    names = spec.columns
    fam = [f for f in spec.families for _ in f.names()]
    m = len(names)
    scale = rng.uniform(0.6, 1.4, m)
    base = np.array([f.base for f in fam]) * scale
    swing = np.array([f.swing for f in fam]) * scale
    noise = np.array([f.noise for f in fam]) * scale
    low = np.array([f.low for f in fam])[:, None]
    high = np.array([f.high for f in fam])[:, None]
    places = [f.places for f in fam]
    phase = rng.uniform(-0.6, 0.6, m)[:, None]
    burst = np.zeros(m)
    shift = np.zeros(m, dtype=np.int64)
    for planted, amp, lead in ((spec.target, 2.0, 0), (spec.partner, 1.5, 0),
                               (spec.leader, 1.5, spec.lead_samples)):
        if planted is not None and planted[0] == h:
            j = names.index(planted[1])
            burst[j], shift[j] = amp * swing[j], lead
    start = np.datetime64(START, "s")
    opts = pacsv.WriteOptions(include_header=False, quoting_style="none", batch_size=chunk_rows)
    written = 0
    with open(path, "wb") as fh:
        fh.write((",".join(["timestamp"] + names) + "\n").encode())
        for first in range(first_row, end, chunk_rows):
            rows = min(chunk_rows, end - first)
            idx = first + np.arange(rows)
            secs = idx * spec.interval
            day = 2 * np.pi * secs / 86_400.0
            weekday = ((secs // 86_400) % 7) < 5
            amp = np.where(weekday, 1.0, 0.4)
            grid = base[:, None] + swing[:, None] * amp * np.sin(day[None, :] - np.pi / 2 + phase)
            grid += noise[:, None] * rng.standard_normal((m, rows))
            for j in np.flatnonzero(burst):
                grid[j] += burst[j] * latent[idx + shift[j]]
            np.clip(grid, low, high, out=grid)
            stamps = np.datetime_as_string(start + secs.astype("timedelta64[s]"), unit="s")
            cols: list[pa.Array] = [pa.array(np.char.add(stamps, "Z"), pa.string())]
            for j in range(m):
                if places[j] == 0:
                    cols.append(pa.array(np.rint(grid[j]).astype(np.int64), pa.int64()))
                else:
                    cols.append(pa.array(np.ldexp(np.rint(np.ldexp(grid[j], places[j])), -places[j]), pa.float64()))
            pacsv.write_csv(pa.Table.from_arrays(cols, names=["timestamp"] + names), fh, write_options=opts)
            written += m * rows
    return written


def ensure(spec: Spec, out: Path = OUT) -> Path:
    """The warehouse home for `spec`, built through our ingest unless a matching one is cached."""
    home = out / f"wh-{spec.slug()}"
    stamp_path = home / "fixture.json"
    if stamp_path.exists():
        stamp = json.loads(stamp_path.read_text())
        if stamp.get("spec") == spec.stamp():
            print(f"fixture: reusing {_show(home)} ({stamp['points']:,} points,"
                  f" {stamp['bytes'] / 2**20:.0f} MiB of Parquet)", flush=True)
            return home
    from warehouse.home import init_home
    from warehouse.ingest.run import IngestOptions, ingest_files

    shutil.rmtree(home, ignore_errors=True)
    out.mkdir(parents=True, exist_ok=True)
    init_home(home, zone="UTC")
    print(f"fixture: building {_show(home)}: {spec.hosts} hosts x {len(spec.columns)} counters"
          f" x {spec.rows:,} samples = {spec.counters * spec.rows:,} points, through our ingest ...", flush=True)
    latent = _latent(spec)
    t0 = time.perf_counter()
    gen_s = ingest_s = 0.0
    points = csv_bytes = 0
    for h in range(spec.hosts):
        csv = out / f"fixture-{spec.slug()}-{spec.host(h)}.csv"
        t = time.perf_counter()
        expected = write_host_csv(spec, h, csv, latent)
        csv_bytes += csv.stat().st_size
        gen_s += time.perf_counter() - t
        t = time.perf_counter()
        (res,) = ingest_files(home, [csv], IngestOptions(source=SOURCE, host=spec.host(h)))
        ingest_s += time.perf_counter() - t
        csv.unlink()
        if res.status != "loaded" or res.values_loaded != expected or res.rows_quarantined or res.cells_quarantined:
            raise SystemExit(f"fixture ingest of {spec.host(h)} went wrong: {res}")
        points += res.values_loaded
        print(f"  {spec.host(h)}: {res.values_loaded:,} values ({h + 1}/{spec.hosts})", end="\r", flush=True)
    files = list((home / "points").rglob("*.parquet"))
    stamp = {"spec": spec.stamp(), "points": points, "files": len(files),
             "bytes": sum(f.stat().st_size for f in files), "csv_bytes": csv_bytes,
             "generate_s": round(gen_s, 1), "ingest_s": round(ingest_s, 1),
             "total_s": round(time.perf_counter() - t0, 1), "built_with": code_note()}
    stamp_path.write_text(json.dumps(stamp, indent=1))
    print(f"\nfixture: {points:,} points in {len(files)} Parquet files ({stamp['bytes'] / 2**20:.0f} MiB) from"
          f" {csv_bytes / 1e6:.0f} MB of CSV; generate {gen_s:.0f} s, ingest {ingest_s:.0f} s", flush=True)
    return home


def _show(path: Path) -> str:
    try:
        return str(path.relative_to(HERE.parent))
    except ValueError:
        return str(path)


def catalog_facts(home: Path, globs: dict[str, str]) -> dict[str, object]:
    """Committed Parquet files, counter_id -> key, and the ids each named glob selects."""
    from warehouse.catalog import match_counters
    from warehouse.home import open_warehouse

    with open_warehouse(home) as wh:
        files = [str(home / r[0]) for r in wh.con.execute("SELECT relpath FROM ingest_files ORDER BY relpath").fetchall()]
        keys = dict(wh.con.execute("SELECT counter_id, key FROM counters").fetchall())
        ids = {name: match_counters(wh, g) for name, g in globs.items()}
    return {"files": files, "keys": keys, "ids": ids}


def warm(files: list[str]) -> None:
    """Read every file once so each alternative starts from the page cache."""
    for f in files:
        with open(f, "rb") as fh:
            while fh.read(16 << 20):
                pass


# -- children ------------------------------------------------------------------------------------

@dataclass
class Measured:
    name: str
    wall: float = math.nan
    peak_mib: float = math.nan
    load: float = math.nan               # 1-minute load average when the child started
    cpu: float = math.nan                # user + system CPU seconds of the child (all its threads)
    info: dict = field(default_factory=dict)
    error: str = ""
    walls: list = field(default_factory=list)   # every run's wall time, when repeated

    @property
    def spread(self) -> str:
        """The slowest repeat's wall time, when there was more than one."""
        return f"{max(self.walls):.2f}" if len(self.walls) > 1 else "-"

    @property
    def work(self) -> float:
        return float(self.info.get("work_s", math.nan))


# The measured process is started by this small launcher, not by the benchmark itself: on Linux a
# child's peak RSS starts from the RSS of the process that forked it (the pre-exec copy counts), so a
# benchmark parent that has built the fixture or loaded pandas would lend the child its own size.
_LAUNCHER = """
import os, sys, time
out, cmd = sys.argv[1], sys.argv[2:]
t0 = time.perf_counter()
pid = os.posix_spawnp(cmd[0], cmd, os.environ)
_, status, usage = os.wait4(pid, 0)
wall = time.perf_counter() - t0
with open(out, "w") as fh:
    fh.write(f"{wall!r} {usage.ru_maxrss} {os.waitstatus_to_exitcode(status)} {usage.ru_utime + usage.ru_stime!r}")
"""


def run_child(name: str, cmd: list[str], result: Path, stdout_to_result: bool = False) -> Measured:
    """Run one alternative to completion: wall seconds, its own peak RSS and what it wrote to `result`
    (or printed on stdout, when `stdout_to_result`)."""
    result.unlink(missing_ok=True)
    usage_file = result.with_name(result.name + ".usage")
    usage_file.unlink(missing_ok=True)
    load = os.getloadavg()[0]
    sink = open(result, "wb") if stdout_to_result else None
    try:
        subprocess.run([sys.executable, "-S", "-c", _LAUNCHER, str(usage_file)] + cmd, stdout=sink, check=True)
    finally:
        if sink is not None:
            sink.close()
    wall_s, maxrss_kib, code_s, cpu_s = usage_file.read_text().split()
    m = Measured(name, float(wall_s), int(maxrss_kib) / 1024, load, cpu=float(cpu_s))
    if int(code_s) != 0:
        m.error = f"exit {code_s}"
    elif not result.exists() or not result.stat().st_size:
        m.error = "no result"
    else:
        # a profiler wrapping the command (bench/scale.py --profile) prints its own lines too
        text = "\n".join(line for line in result.read_text().splitlines() if not line.startswith("py-spy> "))
        m.info = json.loads(text)
    return m


def keep_best(runs: dict[str, Measured], run: Measured) -> None:
    """Keep the fastest successful run per alternative (by wall time), with the largest peak seen."""
    best = runs.get(run.name)
    walls = (best.walls if best else []) + ([run.wall] if not run.error else [])
    peak = max(run.peak_mib, best.peak_mib) if best else run.peak_mib
    if best is None or (not run.error and (best.error or run.wall < best.wall)):
        runs[run.name] = run
    runs[run.name].walls = walls
    runs[run.name].peak_mib = peak


def child_command(script: Path, name: str, job: Path, result: Path) -> list[str]:
    return [sys.executable, str(script), "--child", name, "--job", str(job), "--result", str(result)]


def preload(name: str) -> None:
    """Import what alternative `name` needs before its work is timed, so "work" excludes imports."""
    import importlib

    modules = {"ours": ("warehouse.home", "warehouse.sizing", "warehouse.correlate"),
               "pandas": ("pandas", "pyarrow.parquet"), "duckdb": ("duckdb",), "blas": ("numpy",)}
    for prefix, names in modules.items():
        if name.startswith(prefix):
            for module in names:
                importlib.import_module(module)


def profile_call(fn, path: str | None):
    """Run fn() under cProfile when `path` is given (dump there and print the top of the profile)."""
    if not path:
        return fn()
    import cProfile
    import pstats

    prof = cProfile.Profile()
    try:
        return prof.runcall(fn)
    finally:
        prof.dump_stats(path)
        stats = pstats.Stats(prof, stream=sys.stderr)
        stats.sort_stats("cumulative").print_stats(30)
        stats.sort_stats("tottime").print_stats(20)


# -- printing ------------------------------------------------------------------------------------

def fmt(x: float, spec: str = ".2f") -> str:
    return "-" if x is None or (isinstance(x, float) and math.isnan(x)) else format(x, spec)


def ratio(a: float, b: float) -> float:
    return a / b if b and not math.isnan(a) and not math.isnan(b) else math.nan


def goal(text: str, met: bool | None) -> None:
    mark = "n/a" if met is None else ("met" if met else "MISSED")
    print(f"  [{mark}] {text}")


def code_note() -> str:
    """The commit measured, and which package files differ from it (the working tree is what runs)."""
    root = HERE.parent
    try:
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=root, capture_output=True, text=True,
                              check=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "warehouse"], cwd=root, capture_output=True,
                               text=True, check=True).stdout.split("\n")
    except (OSError, subprocess.CalledProcessError):
        return "code: (not a git checkout)"
    changed = [line[3:] for line in dirty if line.strip()]
    return f"code: HEAD {head}" + (f", uncommitted changes in {', '.join(changed)}" if changed else ", clean")


def machine_note() -> str:
    import platform

    load = os.getloadavg()
    return (f"machine: {os.cpu_count()} cores, {platform.python_implementation()} {platform.python_version()},"
            f" load average now {load[0]:.2f} / {load[1]:.2f} / {load[2]:.2f} (1/5/15 min; shared machine)")


# -- command line ---------------------------------------------------------------------------------

def child_options(ap: argparse.ArgumentParser, children: object) -> None:
    """The options every benchmark shares: its work folder, and the hidden ones a child starts with."""
    ap.add_argument("--out", type=Path, default=OUT, help="work folder (default bench/out)")
    ap.add_argument("--child", choices=sorted(children), help=argparse.SUPPRESS)  # type: ignore[call-overload]
    ap.add_argument("--job", help=argparse.SUPPRESS)
    ap.add_argument("--result", help=argparse.SUPPRESS)


def pick(text: str, allowed: object, what: str = "alternative") -> list[str]:
    """A comma-separated choice such as --only, checked against what exists (SystemExit if unknown)."""
    names = [n.strip() for n in text.split(",") if n.strip()]
    bad = sorted(set(names) - set(allowed))  # type: ignore[call-overload]
    if bad:
        raise SystemExit(f"unknown {what}(s): {', '.join(bad)}; choose from {', '.join(sorted(allowed))}")  # type: ignore[call-overload]
    return names
