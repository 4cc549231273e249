"""The SQL door: read-only `sql` refuses every change, and hostile keys are data, never SQL."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from warehouse.cli import cli
from warehouse.home import init_home, open_warehouse
from warehouse.ingest.run import IngestOptions, ingest_files

DATA = Path(__file__).parent / "data" / "ingest"

# Hosts given with --host reach the key as they are; headers carry the rest.
HOSTS = ["q'uote", 'dq"uote', "semi;colon", "dash--dash", "star*host", "pct%host", "back\\slash",
         "new\nline", "ünï-cødé ☃"]
HEADERS = ["lat'ency (ms)", "lat%ency (ms)"]


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def _tree(root: Path) -> set[str]:
    return {str(p) for p in root.rglob("*")}


@pytest.fixture(scope="module")
def hostile(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Two days at one minute for each hostile host; a shift on day 2 for compare, a daily wave."""
    root = tmp_path_factory.mktemp("door")
    home = root / "wh"
    init_home(home)
    minutes = np.arange(2 * 1440)
    stamps = np.datetime_as_string(np.datetime64("2026-03-02T00:00") + minutes * np.timedelta64(60, "s"))
    rng = np.random.default_rng(3)
    for n, host in enumerate(HOSTS):
        wave = 10 + 5 * np.sin(2 * np.pi * minutes / 60) + (minutes >= 1440) * 4
        cols = [wave + rng.normal(0, 1, len(minutes)), 2 * wave + rng.normal(0, 1, len(minutes))]
        csv = root / f"h{n}.csv"
        with open(csv, "w", encoding="utf-8") as fh:
            fh.write("timestamp," + ",".join('"' + h.replace('"', '""') + '"' for h in HEADERS) + "\n")
            fh.writelines(f"{s}Z,{a:.4f},{b:.4f}\n" for s, a, b in zip(stamps, *cols))
        (result,) = ingest_files(home, [csv], IngestOptions(host=host, source="door"))
        assert result.status == "loaded", result.message
        assert result.values_loaded == 2 * len(minutes)
    return home


def _keys(home: Path) -> list[str]:
    with open_warehouse(home) as wh:
        return [r[0] for r in wh.con.execute("SELECT key FROM counters ORDER BY key").fetchall()]


def test_hostile_keys_are_stored_as_given(hostile: Path) -> None:
    keys = _keys(hostile)
    assert len(keys) == len(HOSTS) * len(HEADERS)
    assert "back\\\\slash/lat'ency" in keys          # a backslash in a part is escaped in the key
    assert "new\nline/lat%ency" in keys
    assert "ünï-cødé ☃/lat'ency" in keys


@pytest.mark.parametrize("host", HOSTS)
def test_exact_key_selects_itself_in_counters(hostile: Path, host: str) -> None:
    with open_warehouse(hostile) as wh:
        (key,) = [r[0] for r in wh.con.execute(
            "SELECT key FROM counters WHERE host = ? AND counter = 'lat''ency'", [host]).fetchall()]
    out = run("--home", str(hostile), "counters", key, "--format", "json")
    assert out.exit_code == 0, out.stderr
    assert [r["key"] for r in json.loads(out.output)] == [key]


def test_globs_match_literally_and_sql_text_is_never_run(hostile: Path) -> None:
    everything = set(_keys(hostile))
    cases = {
        "*'*": {k for k in everything if "'" in k},                 # every lat'ency, and the q'uote host
        '*"*': {k for k in everything if '"' in k},
        "*;*": {k for k in everything if ";" in k},
        "*--*": {k for k in everything if "--" in k},
        "*%*": {k for k in everything if "%" in k},
        "*\n*": {k for k in everything if "\n" in k},
        "*☃*": {k for k in everything if "☃" in k},
        "star[*]host/*": {k for k in everything if k.startswith("star*host/")},   # [*] is a literal star
    }
    for selector, want in cases.items():
        out = run("--home", str(hostile), "counters", selector, "--format", "json")
        assert out.exit_code == 0, (selector, out.stderr)
        assert {r["key"] for r in json.loads(out.output)} == want, selector
    # LIKE wildcards and SQL text are plain characters: they match nothing and change nothing.
    for selector in ("%", "_", "' OR 1=1 --", "x'; DROP TABLE counter_defs; --", '"; DELETE FROM ingests; --'):
        out = run("--home", str(hostile), "counters", selector)
        assert out.exit_code == 1 and out.stderr.count("\n") == 1, selector
        assert out.stderr.startswith("Error: no counter matches"), selector
    assert set(_keys(hostile)) == everything


@pytest.mark.parametrize("host", ["q'uote", "new\nline", "back\\slash"])
def test_analysis_commands_take_hostile_keys(hostile: Path, host: str) -> None:
    with open_warehouse(hostile) as wh:
        keys = dict(wh.con.execute("SELECT counter, key FROM counters WHERE host = ?", [host]).fetchall())
    key, other = keys["lat'ency"], keys["lat%ency"]
    h = str(hostile)
    size = run("--home", h, "size", key, "--format", "json")
    assert size.exit_code == 0, size.stderr
    assert json.loads(size.output)["n"] == 2880
    corr = run("--home", h, "correlate", key, "--against", other, "--format", "json")
    assert corr.exit_code == 0, corr.stderr
    (row,) = json.loads(corr.output)["results"]
    assert row["key"] == other and row["r"] > 0.9
    pat = run("--home", h, "patterns", key, "--max-period", "6h", "--format", "json")
    assert pat.exit_code == 0, pat.stderr
    assert any(abs(p["seconds"] - 3600) <= 120 for p in json.loads(pat.output)["periods"])
    cmp_ = run("--home", h, "compare", key, "--before", "2026-03-02", "--after", "2026-03-03", "--format", "json")
    assert cmp_.exit_code == 0, cmp_.stderr
    moved = json.loads(cmp_.output)
    assert moved["changed"] and 3 < moved["shift"] < 5      # the planted +4


REFUSED = [
    "INSERT INTO settings VALUES ('a', 'b')",
    "DELETE FROM ingests",
    "UPDATE settings SET value = 'x'",
    "DROP TABLE ingests",
    "CREATE TABLE t (a INT)",
    "CREATE OR REPLACE VIEW points AS SELECT 1",
    "COPY (SELECT 1) TO 'out.csv'",
    "COPY settings TO 'out.parquet' (FORMAT parquet)",
    "ATTACH 'other.duckdb' AS o",
    "DETACH cat",
    "INSTALL httpfs",
    "LOAD httpfs",
    "EXPORT DATABASE 'dumped'",
    "PRAGMA enable_profiling",
    "PRAGMA profile_output = 'profile.txt'",
    "SET profiling_output = 'profile.txt'",
    "SET enable_external_access = true",
    "CALL checkpoint()",
    "CHECKPOINT",
    "VACUUM",
    "EXPLAIN ANALYZE COPY (SELECT 1) TO 'out.csv'",
    "/* looks harmless */ EXPLAIN ANALYZE INSERT INTO settings VALUES ('a', 'b')",
    "SELECT 1; COPY (SELECT 1) TO 'out.csv'",
    "SELECT count(*) FROM samples;\n-- a comment\nATTACH 'other.duckdb'",
    "SELECT 1; SELECT 2; DROP TABLE counter_defs",
]


@pytest.mark.parametrize("statement", REFUSED)
def test_changes_are_refused_with_one_line(hostile: Path, tmp_path: Path, statement: str) -> None:
    assert Path.cwd() == tmp_path            # the autouse fixture: relative paths land here
    before = _tree(tmp_path) | _tree(hostile)
    out = run("--home", str(hostile), "sql", statement)
    assert out.exit_code == 1, statement
    assert out.stderr.count("\n") == 1 and "read-only" in out.stderr, out.stderr
    assert _tree(tmp_path) | _tree(hostile) == before


def test_read_only_sql_opens_only_the_warehouse_files(hostile: Path, tmp_path: Path) -> None:
    """The second wall: even a read names no other file, and settings cannot be unlocked."""
    outside = tmp_path / "outside.csv"
    outside.write_text("a\n1\n")
    for statement in (f"SELECT * FROM read_csv('{outside}')", "SELECT * FROM read_text('/etc/hostname')",
                      f"SELECT * FROM read_parquet('{hostile}/points/**/*.parquet')"):
        out = run("--home", str(hostile), "sql", statement)
        assert out.exit_code == 1 and out.stderr.count("\n") == 1, statement
        assert "disabled by configuration" in out.stderr, out.stderr
    fine = run("--home", str(hostile), "sql", "SELECT count(*) AS n FROM samples; PRAGMA table_info('ingests')",
               "--format", "csv")
    assert fine.exit_code == 0 and fine.output.startswith("cid,name,type")
    n = run("--home", str(hostile), "sql", "SELECT count(*) AS n FROM samples", "--format", "csv")
    assert n.output == f"n\n{len(HOSTS) * 2 * 2880}\n"
    explained = run("--home", str(hostile), "sql", "EXPLAIN ANALYZE SELECT count(*) FROM points")
    assert explained.exit_code == 0


def test_write_flag_allows_changes(hostile: Path, tmp_path: Path) -> None:
    out = run("--home", str(hostile), "sql", "--write", f"COPY (SELECT 1 AS a) TO '{tmp_path / 'out.csv'}'")
    assert out.exit_code == 0, out.stderr
    assert (tmp_path / "out.csv").read_text().split() == ["a", "1"]
