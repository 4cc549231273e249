"""The write lock: a busy warehouse says so; readers see before or after, never half."""
from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

from warehouse.errors import BusyError
from warehouse.home import CATALOG, init_home, open_warehouse
from warehouse.ingest.run import IngestOptions, ingest_files
from tests.test_crash import _ingest, _state, _wide_csv

DATA = Path(__file__).parent / "data" / "ingest"


def test_busy_writer_gets_one_clear_error(home: Path) -> None:
    holder = subprocess.Popen(
        [sys.executable, "-c", "import duckdb, sys, time; c = duckdb.connect(sys.argv[1]); print('ready', flush=True);"
         " time.sleep(60)", str(home / CATALOG)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        started = time.monotonic()
        with pytest.raises(BusyError, match="is busy: another process holds the catalog") as err:
            ingest_files(home, [DATA / "wide.csv"], IngestOptions(host="h"))
        assert "PID" in str(err.value) or str(holder.pid) in str(err.value)
        assert time.monotonic() - started < 10
    finally:
        holder.kill()
        holder.wait()
    (result,) = ingest_files(home, [DATA / "wide.csv"], IngestOptions(host="h"))
    assert result.status == "loaded"


@pytest.mark.slow
def test_queries_during_an_ingest_see_before_or_after(tmp_path: Path) -> None:
    csv = tmp_path / "big.csv"
    _wide_csv(csv)
    home = tmp_path / "wh"
    init_home(home)
    proc = _ingest(home, csv)
    seen = set()
    while proc.poll() is None:
        seen.add(_state(home))
        time.sleep(0.05)
    assert proc.returncode == 0
    final = _state(home)
    assert final[:2] == (1, 12_000 * 150)
    assert seen <= {(0, 0, 0), final}
    assert (0, 0, 0) in seen


@pytest.mark.slow
def test_two_ingests_at_once_both_land_and_readers_never_see_half(tmp_path: Path) -> None:
    """Different files (sharing counters) loaded by two processes at once: each waits for the other's
    short commits; a reader in this process sees none, either or both, never part of one."""
    first, second = tmp_path / "a.csv", tmp_path / "b.csv"
    _wide_csv(first, rows=6_000, counters=60)
    _wide_csv(second, rows=4_000, counters=40)
    alone = {}
    for csv in (first, second):
        ref = tmp_path / f"ref-{csv.stem}"
        init_home(ref)
        (r,) = ingest_files(ref, [csv], IngestOptions(host="h"))
        assert r.status == "loaded"
        alone[csv.stem] = _state(ref)
    home = tmp_path / "wh"
    init_home(home)
    procs = [_ingest(home, first), _ingest(home, second)]
    seen = set()
    while any(p.poll() is None for p in procs):
        seen.add(_state(home))
        time.sleep(0.05)
    assert [p.returncode for p in procs] == [0, 0]
    a, b = alone["a"], alone["b"]
    both = _state(home)
    assert both[:2] == (2, a[1] + b[1]) and both[2] == pytest.approx(a[2] + b[2], abs=0.01)
    allowed = {(0, 0, 0), a, b}
    assert all(s in allowed or s == both for s in seen), seen - allowed
    with open_warehouse(home) as wh:
        assert wh.con.execute("SELECT count(*) FROM counters").fetchone()[0] == 60   # shared, registered once


def test_rollup_lock_message_names_the_holder(home: Path) -> None:
    from warehouse.rollup import RollupRequest, rollup, rollup_lock
    ingest_files(home, [DATA / "wide.csv"], IngestOptions(host="h"))
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys, time; from pathlib import Path; from warehouse.rollup import rollup_lock\n"
         "with rollup_lock(Path(sys.argv[1])):\n print('ready', flush=True); time.sleep(60)", str(home)],
        stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        with pytest.raises(BusyError) as err:
            rollup(home, RollupRequest(("week",), "all"))
        assert str(holder.pid) in str(err.value) and "\n" not in str(err.value)
    finally:
        holder.kill()
        holder.wait()
    with rollup_lock(home):
        pass
