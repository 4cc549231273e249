"""`warehouse check --deep`: files re-read against the checksums and row counts recorded at ingest;
`--repair` sets damaged files aside so queries keep working, and says what was lost."""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from warehouse.cli import cli
from warehouse.home import CATALOG, open_warehouse, writer
from warehouse.ingest.run import IngestOptions, ingest_files
from warehouse.rollup import RollupRequest, rollup

DATA = Path(__file__).parent / "data" / "ingest"


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def _two_days(path: Path) -> Path:
    """Two counters every minute from 22:00 to 02:00 UTC: one points file per UTC day."""
    lines = ["timestamp,cpu (%),queue"]
    for m in range(240):
        h, mi = divmod(22 * 60 + m, 60)
        day = 2 + h // 24
        lines.append(f"2026-03-0{day}T{h % 24:02d}:{mi:02d}:00Z,{m % 37},{m % 5}")
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture
def loaded(home: Path, tmp_path: Path) -> Path:
    results = ingest_files(home, [_two_days(tmp_path / "two.csv"), DATA / "wide.csv"], IngestOptions(host="h1"))
    assert [r.status for r in results] == ["loaded", "loaded"]
    return home


def _files(home: Path) -> list[tuple[str, int, str]]:
    """Points files: two.csv's 2026-03-02 and 2026-03-03, then wide.csv's."""
    with open_warehouse(home) as wh:
        return wh.con.execute("SELECT relpath, rows, f.sha256 FROM ingest_files f JOIN ingests USING (ingest_id)"
                              " ORDER BY path LIKE '%wide.csv', day").fetchall()


def _points(home: Path) -> int:
    with open_warehouse(home) as wh:
        return wh.con.execute("SELECT count(*) FROM points").fetchone()[0]


def _flip(path: Path, at: float = 0.5) -> None:
    data = bytearray(path.read_bytes())
    k = int(len(data) * at)
    data[k:k + 8] = bytes(b ^ 0xFF for b in data[k:k + 8])
    path.write_bytes(bytes(data))


def test_checksums_recorded_at_ingest_match_the_files(loaded: Path) -> None:
    files = _files(loaded)
    assert len(files) == 3                      # two UTC days, and one file of wide.csv
    for rel, _, sha in files:
        assert sha == hashlib.sha256((loaded / rel).read_bytes()).hexdigest()
    with open_warehouse(loaded) as wh:
        (qfile, qsha), = wh.con.execute(
            "SELECT quarantine_file, quarantine_sha256 FROM ingests WHERE quarantine_file IS NOT NULL").fetchall()
    assert qsha == hashlib.sha256((loaded / qfile).read_bytes()).hexdigest()
    out = run("--home", str(loaded), "check", "--deep")
    assert out.exit_code == 0
    assert out.output == "ok: catalog and files agree\ndeep check: 4 files re-read\n"


def test_flipped_bytes_are_found_and_repair_keeps_queries_working(loaded: Path) -> None:
    files = _files(loaded)
    rel, rows, _ = files[0]
    total = _points(loaded)
    _flip(loaded / rel)
    found = run("--home", str(loaded), "check", "--deep")
    assert found.exit_code == 1
    assert f"  damaged: {rel} (checksum differs from the one recorded at ingest)" in found.output.splitlines()
    fixed = run("--home", str(loaded), "check", "--deep", "--repair", "--format", "json")
    assert fixed.exit_code == 0, fixed.output
    (repaired,) = json.loads(fixed.output)["repaired"]
    assert repaired["relpath"] == rel and repaired["rows"] == rows and repaired["moved_to"] == f"damaged/{rel}"
    assert f"{rows} points of 2026-03-02 (UTC)" in repaired["lost"] and "--replace" in repaired["lost"]
    assert not (loaded / rel).exists() and (loaded / "damaged" / rel).exists()
    assert _points(loaded) == total - rows                 # queries work, without the damaged file
    with open_warehouse(loaded) as wh:
        assert wh.con.execute("SELECT relpath, kind, rows, reason FROM damaged_files").fetchall() == [
            (rel, "points", rows, "checksum differs from the one recorded at ingest")]
    after = run("--home", str(loaded), "check", "--deep")
    assert after.exit_code == 0 and after.output.startswith("ok:")


def test_replace_restores_what_repair_set_aside(loaded: Path, tmp_path: Path) -> None:
    total = _points(loaded)
    _flip(loaded / _files(loaded)[1][0], at=0.3)
    assert run("--home", str(loaded), "check", "--repair").exit_code == 0
    assert _points(loaded) < total
    (again,) = ingest_files(loaded, [tmp_path / "two.csv"], IngestOptions(host="h1", replace=True))
    assert again.status == "loaded"
    assert _points(loaded) == total
    assert run("--home", str(loaded), "check", "--deep").exit_code == 0


def test_files_without_checksum_are_decoded_and_truncation_found(loaded: Path) -> None:
    """Files written before migration 0003 carry no checksum: a cut file is still found."""
    with writer(loaded) as con:
        con.execute("UPDATE ingest_files SET sha256 = NULL")
    rel = _files(loaded)[0][0]
    data = (loaded / rel).read_bytes()
    (loaded / rel).write_bytes(data[: len(data) // 2])
    out = run("--home", str(loaded), "check", "--deep", "--format", "json")
    assert out.exit_code == 1
    report = json.loads(out.output)
    assert report["files_without_checksum"] == 3
    (damaged,) = report["damaged"]
    assert damaged["relpath"] == rel and damaged["reason"].startswith("unreadable: ")


def test_missing_and_damaged_quarantine_files_are_dropped_by_repair(loaded: Path) -> None:
    rel = _files(loaded)[2][0]
    (loaded / rel).unlink()
    with open_warehouse(loaded, views=False) as wh:
        (qfile,) = wh.con.execute("SELECT quarantine_file FROM ingests WHERE quarantine_file IS NOT NULL").fetchone()
    _flip(loaded / qfile, at=0.4)
    broken = run("--home", str(loaded), "sql", "SELECT count(*) FROM points")
    assert broken.exit_code == 1 and broken.stderr.count("\n") == 1      # a listed file is gone: one line,
    assert "check --deep" in broken.stderr                                # saying what to run
    out = run("--home", str(loaded), "check", "--repair")
    assert out.exit_code == 0, out.output
    assert "dropped from the catalog: 7 points of 2026-03-02 (UTC)" in " ".join(out.output.split())
    assert f"set aside as damaged/{qfile}: the quarantine rows" in " ".join(out.output.split())
    fine = run("--home", str(loaded), "sql", "SELECT (SELECT count(*) FROM points) AS p, (SELECT count(*) FROM quarantine) AS q",
               "--format", "csv")
    assert fine.exit_code == 0 and fine.output == "p,q\n480,0\n"


def test_rollup_due_recomputes_periods_of_a_repaired_file(loaded: Path) -> None:
    rollup(loaded, RollupRequest(("day",), "all"))
    rel, rows, _ = _files(loaded)[1]             # 2026-03-03 (UTC): 120 rows of two counters
    _flip(loaded / rel)
    assert run("--home", str(loaded), "check", "--repair").exit_code == 0
    rollup(loaded, RollupRequest(("day",), "due"))
    with open_warehouse(loaded) as wh:
        stored = wh.con.execute("SELECT coalesce(sum(n), 0) FROM rollup_day").fetchone()[0]
        counted = wh.con.execute("SELECT count(*) FROM points").fetchone()[0]
    assert stored == counted


def test_old_catalog_gains_the_checksum_columns(tmp_path: Path) -> None:
    """A home made before migration 0003 is migrated on open and checks clean."""
    from warehouse.migrate import available
    root = tmp_path / "old"
    root.mkdir()
    for sub in ("points", "quarantine", "staging"):
        (root / sub).mkdir()
    con = duckdb.connect(str(root / CATALOG))
    con.execute("CREATE TABLE schema_version (version INTEGER PRIMARY KEY, name VARCHAR NOT NULL,"
                " description VARCHAR NOT NULL, applied TIMESTAMPTZ NOT NULL)")
    for m in available()[:2]:
        con.execute(m.sql)
        con.execute("INSERT INTO schema_version VALUES (?, ?, ?, now())", [m.version, m.name, m.description])
    con.execute("INSERT INTO settings VALUES ('zone', 'UTC')")
    con.close()
    out = run("--home", str(root), "check", "--deep", "--format", "json")
    assert out.exit_code == 0, out.output
    assert json.loads(out.output)["files_checked"] == 0
    with open_warehouse(root) as wh:
        assert wh.con.execute("SELECT max(version) FROM schema_version").fetchone()[0] == 3


def test_commands_over_a_damaged_file_fail_in_one_line_pointing_at_check(loaded: Path) -> None:
    path = loaded / _files(loaded)[1][0]                 # not the first file a view names
    data = bytearray(path.read_bytes())
    data[-8:-4] = b"\xff\xff\xff\x0f"                     # the footer's length: the file cannot be opened
    path.write_bytes(bytes(data))
    for args in (["sql", "SELECT sum(value) FROM points"], ["size", "h1/cpu"]):
        out = run("--home", str(loaded), *args)
        assert out.exit_code == 1, args
        assert out.stderr.count("\n") == 1 and "`warehouse check --deep` finds it" in out.stderr, out.stderr
