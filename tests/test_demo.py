"""`warehouse demo`: the whole job on the embedded scenario, checked against its planted list."""
from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from seed.generate import MALFORMED
from warehouse.cli import cli
from warehouse.home import open_warehouse


@pytest.mark.slow
def test_demo_loads_everything_and_quarantines_exactly_the_planted_rows(tmp_path: Path) -> None:
    home = tmp_path / "demo"
    result = CliRunner().invoke(cli, ["--home", str(home), "demo"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert "generated 48 CSV files" in result.output
    assert "rows_quarantined: 5" in result.output and "cells_quarantined: 2" in result.output
    with open_warehouse(home) as wh:
        got = sorted(wh.con.execute(
            "SELECT regexp_extract(file, '[^/]+/[^/]+$'), line FROM quarantine").fetchall())
        accounting = wh.con.execute(
            "SELECT count(*) FROM ingests WHERE rows_read <> rows_loaded + rows_quarantined").fetchone()[0]
        hostless = wh.con.execute("SELECT count(*) FROM counters WHERE host = ''").fetchone()[0]
        zone = wh.zone
    assert got == sorted((m.file, m.line_small) for m in MALFORMED)
    assert accounting == 0
    assert hostless == 0
    assert zone == "Europe/Berlin"
    again = CliRunner().invoke(cli, ["--home", str(home), "demo"], catch_exceptions=False)
    assert again.exit_code == 0 and "(48 skipped as already loaded)" in again.output
