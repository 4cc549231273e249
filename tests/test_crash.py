"""Processes killed at random moments: ingest and rollup leave nothing half-done, `check` stays
clean, queries work, and running the command again gives exactly the state of an uninterrupted run."""
from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from warehouse.catalog import check
from warehouse.home import init_home, open_warehouse, writer
from warehouse.ingest.run import IngestOptions, ingest_files
from warehouse.rollup import RollupRequest, rollup

TRIALS = 20            # the issue asks for at least 20 of each
ROLLUP_ARGS = ["rollup", "--all", "--period", "day", "--period", "week", "--period", "month"]


def _wide_csv(path: Path, rows: int = 12_000, counters: int = 150, bad_every: int = 0) -> None:
    rng = np.random.default_rng(7)
    start = np.datetime64("2026-03-02T00:00:00")
    with open(path, "w") as fh:
        fh.write("timestamp," + ",".join(f"c{j} (ms)" for j in range(counters)) + "\n")
        for lo in range(0, rows, 2000):
            block = np.round(rng.gamma(2.0, 3.0, size=(min(2000, rows - lo), counters)), 3)
            stamps = np.datetime_as_string(start + np.arange(lo, lo + len(block)) * np.timedelta64(15, "s"))
            lines = [s + "Z," + ",".join(map(str, r)) + "\n" for s, r in zip(stamps, block.tolist())]
            if bad_every:
                lines[::bad_every] = [f"not a time,{i}\n" for i in range(len(lines[::bad_every]))]
            fh.writelines(lines)


def _command(home: Path, *args: str) -> subprocess.Popen:
    env = dict(os.environ, WAREHOUSE_LOCK_WAIT="20")
    return subprocess.Popen([sys.executable, "-m", "warehouse", "--home", str(home), "-q", *args], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _ingest(home: Path, csv: Path) -> subprocess.Popen:
    return _command(home, "ingest", str(csv), "--host", "h")


def _state(home: Path) -> tuple[int, int, float]:
    with open_warehouse(home) as wh:
        return wh.con.execute(
            "SELECT (SELECT count(*) FROM ingests), count(*), coalesce(round(sum(value), 3), 0) FROM points").fetchone()


def _full_state(home: Path) -> tuple:
    with open_warehouse(home) as wh:
        quarantined = wh.con.execute("SELECT count(*) FROM quarantine").fetchone()[0]
    return (*_state(home), quarantined)


def _startup_seconds() -> float:
    """What a fresh interpreter takes to import the command: kills before that test nothing."""
    started = time.monotonic()
    subprocess.run([sys.executable, "-c", "import warehouse.cli"], check=True)
    return time.monotonic() - started


def _kill_at(proc: subprocess.Popen, seconds: float) -> bool:
    """SIGKILL `proc` after `seconds`; True when it was still running then."""
    time.sleep(seconds)
    running = proc.poll() is None
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    return running


def _clean_after_crash(home: Path) -> dict:
    """What `warehouse check` must find after a kill: nothing missing or damaged; only orphans
    or staging left by the dead process, which --fix removes."""
    with open_warehouse(home, views=False) as wh:
        report = check(wh, fix=True, deep=True)
    assert not report["missing"] and not report["damaged"], report
    return report


@pytest.mark.slow
def test_killed_ingest_then_rerun_loads_exactly_once(tmp_path: Path) -> None:
    csv = tmp_path / "big.csv"
    _wide_csv(csv, rows=6_000, counters=120, bad_every=97)      # 25 h: two UTC days, and a quarantine file
    reference = tmp_path / "ref"
    init_home(reference)
    startup = _startup_seconds()
    started = time.monotonic()
    assert _ingest(reference, csv).wait() == 0
    duration = time.monotonic() - started
    full = _full_state(reference)
    assert full[0] == 1 and full[3] == 63 and full[1] == (6_000 - 63) * 120   # 21 bad rows per block of 2,000
    empty = (0, 0, 0, 0)
    rng = random.Random(11)
    interrupted = 0
    phases: dict[str, int] = {}
    for trial in range(TRIALS):
        home = tmp_path / f"trial{trial}"
        init_home(home)
        interrupted += _kill_at(_ingest(home, csv), rng.uniform(0.8 * startup, 0.9 * duration))
        report = _clean_after_crash(home)
        seen = _full_state(home)
        assert seen in {empty, full}, f"partial state visible after kill {trial}"
        phase = ("committed" if seen == full else "moved, not committed" if report["orphans"]
                 else "writing" if report["stale_staging"] else "before writing")
        phases[phase] = phases.get(phase, 0) + 1
        (again,) = ingest_files(home, [csv], IngestOptions(host="h"))
        assert again.status in {"loaded", "skipped"}, again.message
        assert _full_state(home) == full
        with open_warehouse(home, views=False) as wh:
            assert check(wh, deep=True)["ok"]
    print(f"ingest: {interrupted} of {TRIALS} kills landed while it ran ({duration:.1f} s uninterrupted): {phases}")
    assert interrupted >= TRIALS // 3, f"only {interrupted} kills landed while the ingest ran"


def _rollup_rows(home: Path) -> dict[str, list[tuple]]:
    """Every rollup row but its computed_at, in a fixed order."""
    out = {}
    with open_warehouse(home) as wh:
        for kind in ("day", "week", "month"):
            out[kind] = wh.con.execute(
                f"SELECT * EXCLUDE (computed_at) FROM rollup_{kind} ORDER BY period_start, counter_id").fetchall()
        out["seen"] = wh.con.execute("SELECT period, ingest_id FROM rollup_seen ORDER BY ALL").fetchall()
    return out


def _forget_rollups(home: Path) -> None:
    with writer(home) as con:
        for table in ("rollup_day", "rollup_week", "rollup_month", "rollup_seen"):
            con.execute(f"DELETE FROM {table}")


@pytest.mark.slow
def test_killed_rollup_then_rerun_equals_an_uninterrupted_run(tmp_path: Path) -> None:
    csv = tmp_path / "days.csv"
    _wide_csv(csv, rows=6_000, counters=60)
    home = tmp_path / "wh"
    init_home(home, zone="Europe/Berlin")
    (loaded,) = ingest_files(home, [csv], IngestOptions(host="h"))
    assert loaded.status == "loaded"
    points = _state(home)
    startup = _startup_seconds()
    started = time.monotonic()
    assert _command(home, *ROLLUP_ARGS).wait() == 0
    duration = time.monotonic() - started
    full = _rollup_rows(home)
    assert len(full["day"]) == 2 * 60 and len(full["week"]) == 60 and len(full["month"]) == 60
    empty = {"day": [], "week": [], "month": [], "seen": []}
    rng = random.Random(5)
    interrupted = 0
    for trial in range(TRIALS):
        _forget_rollups(home)
        interrupted += _kill_at(_command(home, *ROLLUP_ARGS), rng.uniform(0.8 * startup, 0.9 * duration))
        _clean_after_crash(home)
        assert _rollup_rows(home) in (empty, full), f"partial rollup visible after kill {trial}"
        assert _state(home) == points                          # queries work and see the same points
        rollup(home, RollupRequest(("day", "week", "month"), "all"))
        assert _rollup_rows(home) == full
    print(f"rollup: {interrupted} of {TRIALS} kills landed while it ran ({duration:.1f} s uninterrupted)")
    assert interrupted >= TRIALS // 3, f"only {interrupted} kills landed while the rollup ran"
