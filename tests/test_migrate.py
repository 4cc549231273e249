"""Migrations: from scratch, re-run is a no-op, and every refusal named in the style guide."""
from __future__ import annotations

from pathlib import Path

import duckdb
import pytest

from warehouse import migrate
from warehouse.errors import CatalogError
from warehouse.home import CATALOG, init_home, open_warehouse


def test_from_scratch_then_rerun_is_noop(tmp_path: Path) -> None:
    con = duckdb.connect(str(tmp_path / "c.duckdb"))
    applied = migrate.migrate(con)
    assert [m.version for m in applied] == list(range(1, len(migrate.available()) + 1))
    assert migrate.migrate(con) == []
    rows = con.execute("SELECT version, name, description FROM schema_version").fetchall()
    assert rows[0][:2] == (1, "catalog") and rows[0][2].startswith("catalog:")
    tables = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()}
    assert {"sources", "counter_defs", "ingests", "ingest_files", "settings"} <= tables


def test_refuses_catalog_newer_than_code(tmp_path: Path) -> None:
    con = duckdb.connect(str(tmp_path / "c.duckdb"))
    migrate.migrate(con)
    con.execute("INSERT INTO schema_version VALUES (999, 'future', 'from a newer release', now())")
    with pytest.raises(CatalogError, match="newer|knows only"):
        migrate.pending(con)


def test_refuses_unversioned_catalog_with_tables(tmp_path: Path) -> None:
    con = duckdb.connect(str(tmp_path / "c.duckdb"))
    con.execute("CREATE TABLE stuff (a INTEGER)")
    with pytest.raises(CatalogError, match="no schema_version"):
        migrate.migrate(con)


def test_refuses_gaps_in_applied_versions(tmp_path: Path) -> None:
    con = duckdb.connect(str(tmp_path / "c.duckdb"))
    migrate.migrate(con)
    con.execute("INSERT INTO schema_version VALUES (0, 'zero', 'odd', now())")
    with pytest.raises(CatalogError, match="gaps"):
        migrate.pending(con)


def test_refuses_gaps_or_duplicates_in_shipped_numbers() -> None:
    migrate._check_numbers([m.version for m in migrate.available()])
    with pytest.raises(CatalogError, match="without gaps"):
        migrate._check_numbers([1, 3])
    with pytest.raises(CatalogError, match="without gaps"):
        migrate._check_numbers([1, 1, 2])


def test_failed_migration_rolls_back(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    broken = migrate.Migration(1, "broken", "fails half-way", "CREATE TABLE ok_table (a INTEGER); SELECT nope;")
    monkeypatch.setattr(migrate, "available", lambda: [broken])
    con = duckdb.connect(str(tmp_path / "c.duckdb"))
    with pytest.raises(duckdb.Error):
        migrate.migrate(con)
    tables = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()}
    assert tables == set()


def test_open_applies_migrations_and_init_keeps_zone(tmp_path: Path) -> None:
    home = tmp_path / "wh"
    assert init_home(home, zone="Europe/Berlin") is True
    assert init_home(home, zone="Europe/Berlin") is False
    with pytest.raises(Exception, match="zone"):
        init_home(home, zone="UTC")
    with open_warehouse(home) as wh:
        assert wh.zone == "Europe/Berlin"
        assert wh.con.execute("SELECT max(version) FROM schema_version").fetchone()[0] == len(migrate.available())
    assert (home / CATALOG).exists()


def test_open_missing_home_says_what_to_do(tmp_path: Path) -> None:
    with pytest.raises(CatalogError, match="init` first"):
        open_warehouse(tmp_path / "nowhere")
