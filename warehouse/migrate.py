"""Apply the numbered migrations in warehouse/migrations/ in order, each in its own transaction."""
from __future__ import annotations

import re
from dataclasses import dataclass
from importlib import resources

import duckdb

from warehouse.errors import CatalogError

_NAME = re.compile(r"^(\d{4})_([a-z0-9_]+)\.sql$")


@dataclass(frozen=True)
class Migration:
    version: int
    name: str
    description: str
    sql: str


def available() -> list[Migration]:
    """Every migration shipped with the code, checked for gaps and duplicate numbers."""
    found: list[Migration] = []
    for entry in resources.files("warehouse.migrations").iterdir():
        match = _NAME.match(entry.name)
        if not match:
            continue
        sql = entry.read_text(encoding="utf-8")
        found.append(Migration(int(match[1]), match[2], _description(sql), sql))
    found.sort(key=lambda m: m.version)
    _check_numbers([m.version for m in found])
    return found


def _check_numbers(numbers: list[int]) -> None:
    """Shipped migrations must be numbered 1..N, no gaps, no duplicates."""
    if numbers != list(range(1, len(numbers) + 1)):
        raise CatalogError(f"migrations are not numbered 1..{len(numbers)} without gaps: {numbers}")


def _description(sql: str) -> str:
    first = sql.lstrip().splitlines()[0] if sql.strip() else ""
    return first[2:].strip() if first.startswith("--") else ""


def applied(con: duckdb.DuckDBPyConnection) -> list[int]:
    """Versions recorded in schema_version; refuses an unversioned catalog that has tables."""
    tables = {r[0] for r in con.execute(
        "SELECT table_name FROM duckdb_tables() WHERE database_name = current_database()"
    ).fetchall()}
    if "schema_version" not in tables:
        if tables:
            raise CatalogError("catalog has tables but no schema_version: not a warehouse catalog")
        return []
    return [r[0] for r in con.execute("SELECT version FROM schema_version ORDER BY version").fetchall()]


def pending(con: duckdb.DuckDBPyConnection) -> list[Migration]:
    """Migrations not yet applied; refuses a catalog newer than the code."""
    done = applied(con)
    known = available()
    if done and max(done) > len(known):
        raise CatalogError(
            f"catalog is at schema version {max(done)} but this code knows only {len(known)}: "
            "upgrade counter-warehouse"
        )
    if done != list(range(1, len(done) + 1)):
        raise CatalogError(f"catalog schema_version has gaps: {done}")
    return known[len(done):]


def migrate(con: duckdb.DuckDBPyConnection) -> list[Migration]:
    """Apply what is pending, each migration and its schema_version row in one transaction."""
    todo = pending(con)
    for migration in todo:
        con.execute("BEGIN TRANSACTION")
        try:
            if migration.version == 1:
                con.execute(
                    "CREATE TABLE schema_version (version INTEGER PRIMARY KEY, name VARCHAR NOT NULL,"
                    " description VARCHAR NOT NULL, applied TIMESTAMPTZ NOT NULL)"
                )
            con.execute(migration.sql)
            con.execute(
                "INSERT INTO schema_version VALUES (?, ?, ?, now())",
                [migration.version, migration.name, migration.description],
            )
            con.execute("COMMIT")
        except Exception:
            con.execute("ROLLBACK")
            raise
    return todo
