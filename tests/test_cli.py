"""The command line through click's CliRunner: exit codes, exact output, state after."""
from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from warehouse.cli import cli
from warehouse.home import open_warehouse

DATA = Path(__file__).parent / "data" / "ingest"
README = Path(__file__).parent.parent / "README.md"


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


@pytest.fixture
def wh(tmp_path: Path) -> Path:
    home = tmp_path / "wh"
    assert run("--home", str(home), "init", "--zone", "Europe/Berlin").exit_code == 0
    return home


def test_init_says_what_it_did(tmp_path: Path) -> None:
    home = tmp_path / "new"
    result = run("--home", str(home), "init", "--zone", "Europe/Berlin")
    assert result.exit_code == 0
    assert result.output == f"created {home} (zone Europe/Berlin)\n"
    bad = run("--home", str(tmp_path / "x"), "init", "--zone", "Mars/Olympus")
    assert bad.exit_code == 1 and "unknown time zone 'Mars/Olympus'" in bad.stderr


def test_ingest_summary_and_accounting(wh: Path) -> None:
    result = run("--home", str(wh), "ingest", str(DATA / "wide.csv"), "--source", "lab", "--host", "h1")
    assert result.exit_code == 0, result.output
    assert result.output.splitlines() == [
        f"loaded {DATA / 'wide.csv'} [wide]: rows_read 6 = loaded 3 + quarantined 3; 7 values, 3 counters,"
        " 1 bad cells quarantined",
        "1 loaded, 0 skipped, 0 failed; 7 values; 3 rows quarantined",
    ]
    again = run("--home", str(wh), "ingest", str(DATA / "wide.csv"), "--host", "h1", "--format", "json")
    (row,) = json.loads(again.output)
    assert row["status"] == "skipped" and set(row) >= {"rows_read", "rows_loaded", "rows_quarantined", "values_loaded"}


def test_bad_file_is_one_line_exit_1_and_others_load(wh: Path, tmp_path: Path) -> None:
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    result = run("--home", str(wh), "ingest", str(empty), str(DATA / "long.csv"))
    assert result.exit_code == 1
    assert result.stderr.strip() == f"Error: {empty}: empty file"
    assert "1 loaded, 0 skipped, 1 failed" in result.output
    with open_warehouse(wh) as w:
        assert w.con.execute("SELECT count(*) FROM points").fetchone()[0] == 4


def test_counters_glob_table_and_json(wh: Path) -> None:
    run("--home", str(wh), "ingest", str(DATA / "counterpaths.csv"))
    table = run("--home", str(wh), "counters", "*disk*transfer*")
    assert table.exit_code == 0
    lines = table.output.splitlines()
    assert lines[0].split() == ["key", "source", "host", "object", "instance", "counter", "unit", "kind", "n", "first_ts", "last_ts"]
    assert len(lines) == 3 and lines[2].startswith("vdi-hv01/PhysicalDisk/0 C:/Avg. Disk sec\\/Transfer")
    rows = json.loads(run("--home", str(wh), "counters", "--format", "json").output)
    assert len(rows) == 3 and set(rows[0]) == {"key", "source", "host", "object", "instance", "counter", "unit",
                                               "kind", "n", "first_ts", "last_ts"}
    assert {r["n"] for r in rows} == {3, 2}
    missing = run("--home", str(wh), "counters", "*procesor time*")
    assert missing.exit_code == 1 and "no counter matches" in missing.stderr


def test_sql_read_only_unless_write(wh: Path) -> None:
    run("--home", str(wh), "ingest", str(DATA / "long.csv"))
    out = run("--home", str(wh), "sql", "SELECT count(*) AS n, round(sum(value), 2) AS s FROM samples", "--format", "csv")
    assert out.exit_code == 0 and out.output == "n,s\n4,25.65\n"
    for statement in ("INSERT INTO settings VALUES ('a', 'b')", "DELETE FROM ingests", "DROP TABLE ingests",
                      "CREATE TABLE t (a INT)", "COPY (SELECT 1) TO 'x.csv'", "ATTACH 'x.duckdb'", "INSTALL httpfs"):
        refused = run("--home", str(wh), "sql", statement)
        assert refused.exit_code == 1, statement
        assert refused.stderr.count("\n") == 1 and "read-only" in refused.stderr
    assert not Path("x.csv").exists()
    made = run("--home", str(wh), "sql", "--write", "CREATE TABLE notes (a INTEGER); INSERT INTO notes VALUES (7)")
    assert made.exit_code == 0
    assert run("--home", str(wh), "sql", "SELECT a FROM notes", "--format", "json").output.strip() == '[\n  {\n    "a": 7\n  }\n]'


def test_sql_parquet_out(wh: Path, tmp_path: Path) -> None:
    import pyarrow.parquet as pq
    run("--home", str(wh), "ingest", str(DATA / "long.csv"))
    target = tmp_path / "out.parquet"
    result = run("--home", str(wh), "sql", "SELECT key, value FROM samples", "--format", "parquet", "--out", str(target))
    assert result.exit_code == 0 and pq.read_table(target).num_rows == 4
    assert run("--home", str(wh), "sql", "SELECT 1", "--format", "parquet").exit_code == 2


def test_status_json_and_check(wh: Path) -> None:
    run("--home", str(wh), "ingest", str(DATA / "wide.csv"), "--host", "h1")
    status = json.loads(run("--home", str(wh), "status", "--format", "json").output)
    assert status["counters"] == 3 and status["points"] == 7 and status["rows_quarantined"] == 3
    assert status["first_ts"].startswith("2026-03-02T09:00:00+01:00")  # shown in the warehouse zone
    assert set(status) >= {"sources", "counters", "files_loaded", "points", "first_ts", "last_ts",
                           "bytes_on_disk", "rows_quarantined"}
    checked = run("--home", str(wh), "check")
    assert checked.exit_code == 0 and checked.output == "ok: catalog and files agree\n"
    stray = wh / "points" / "source=x" / "date=2026-01-01" / "stray.parquet"
    stray.parent.mkdir(parents=True)
    stray.write_bytes(b"x")
    found = run("--home", str(wh), "check")
    assert found.exit_code == 1 and "orphans: points/source=x/date=2026-01-01/stray.parquet" in found.output
    assert run("--home", str(wh), "check", "--fix").exit_code == 0 and not stray.exists()


def test_no_warehouse_is_one_line(tmp_path: Path) -> None:
    result = run("--home", str(tmp_path / "none"), "status")
    assert result.exit_code == 1
    assert result.stderr == f"Error: no warehouse at {tmp_path / 'none'}: run `warehouse --home {tmp_path / 'none'} init` first\n"


def test_every_command_has_help_with_example_and_is_in_readme() -> None:
    readme = README.read_text(encoding="utf-8")
    for name, command in cli.commands.items():
        help_text = run(name, "--help").output
        assert "Example:" in help_text, name
        assert re.search(rf"warehouse( --home \S+)? {name}\b", readme), f"README lacks `warehouse {name}`"
    for macro in re.findall(r"CREATE OR REPLACE MACRO (\w+)", (Path(__file__).parent.parent / "warehouse" / "sql" / "macros.sql").read_text()):
        assert macro in readme, f"README lacks macro {macro}"


def test_selectors_match_names_with_slashes_as_typed(wh: Path) -> None:
    run("--home", str(wh), "ingest", str(DATA / "counterpaths.csv"))
    for selector in ("*disk sec/transfer*", "*Disk sec\\/Transfer*", "vdi-hv01/PhysicalDisk/0 C:/Avg. Disk sec/Transfer"):
        out = run("--home", str(wh), "counters", selector, "--format", "json")
        assert out.exit_code == 0, (selector, out.stderr)
        assert [r["counter"] for r in json.loads(out.output)] == ["Avg. Disk sec/Transfer"], selector
