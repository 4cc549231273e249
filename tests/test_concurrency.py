"""The write lock: a busy warehouse says so; readers see before or after, never half."""
from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

from warehouse.errors import BusyError
from warehouse.home import CATALOG, init_home
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
