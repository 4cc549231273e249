"""A process killed mid-ingest leaves nothing visible and partial; re-running loads exactly once."""
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
from warehouse.home import init_home, open_warehouse


def _wide_csv(path: Path, rows: int = 12_000, counters: int = 150) -> None:
    rng = np.random.default_rng(7)
    start = np.datetime64("2026-03-02T00:00:00")
    with open(path, "w") as fh:
        fh.write("timestamp," + ",".join(f"c{j} (ms)" for j in range(counters)) + "\n")
        for lo in range(0, rows, 2000):
            block = np.round(rng.gamma(2.0, 3.0, size=(min(2000, rows - lo), counters)), 3)
            stamps = np.datetime_as_string(start + np.arange(lo, lo + len(block)) * np.timedelta64(15, "s"))
            fh.writelines(s + "Z," + ",".join(map(str, r)) + "\n" for s, r in zip(stamps, block.tolist()))


def _ingest(home: Path, csv: Path) -> subprocess.Popen:
    env = dict(os.environ, WAREHOUSE_LOCK_WAIT="20")
    return subprocess.Popen([sys.executable, "-m", "warehouse", "--home", str(home), "-q", "ingest", str(csv),
                             "--host", "h"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _state(home: Path) -> tuple[int, int, float]:
    with open_warehouse(home) as wh:
        return wh.con.execute(
            "SELECT (SELECT count(*) FROM ingests), count(*), coalesce(round(sum(value), 3), 0) FROM points").fetchone()


@pytest.mark.slow
def test_killed_ingest_then_rerun_loads_exactly_once(tmp_path: Path) -> None:
    csv = tmp_path / "big.csv"
    _wide_csv(csv)
    reference = tmp_path / "ref"
    init_home(reference)
    started = time.monotonic()
    assert _ingest(reference, csv).wait() == 0
    duration = time.monotonic() - started
    full = _state(reference)
    assert full[:2] == (1, 12_000 * 150)
    rng = random.Random(11)
    interrupted = 0
    for trial in range(4):
        home = tmp_path / f"trial{trial}"
        init_home(home)
        proc = _ingest(home, csv)
        time.sleep(rng.uniform(0.05, duration))
        interrupted += proc.poll() is None
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        seen = _state(home)
        assert seen in {(0, 0, 0), full}, f"partial state visible after kill: {seen}"
        with open_warehouse(home) as wh:
            check(wh, fix=True)
        assert _ingest(home, csv).wait() == 0
        assert _state(home) == full
        with open_warehouse(home) as wh:
            report = check(wh)
        assert report["ok"], report
    assert interrupted >= 2, "the kills should land while the ingest is running"
