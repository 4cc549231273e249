"""Find or create a warehouse home and open connections to it.

The catalog (catalog.duckdb) is small metadata. Readers copy it into an in-memory database and
let go of the file at once, so a long query never blocks an ingest's commit, and every query sees
one committed state. Writers hold the file only for a short transaction.
"""
from __future__ import annotations

import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from types import TracebackType
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import duckdb

from warehouse.errors import BusyError, CatalogError, WarehouseError
from warehouse.migrate import migrate, pending
from warehouse.sql import install, quote_ident

CATALOG = "catalog.duckdb"
DEFAULT_HOME = "warehouse-data"


def resolve_home(home: str | os.PathLike[str] | None) -> Path:
    """--home, else $WAREHOUSE_HOME, else ./warehouse-data."""
    chosen = home or os.environ.get("WAREHOUSE_HOME") or DEFAULT_HOME
    return Path(chosen).expanduser().resolve()


def lock_wait_seconds() -> float:
    """How long a writer waits for another process's lock before saying the warehouse is busy."""
    try:
        return float(os.environ.get("WAREHOUSE_LOCK_WAIT", "20"))
    except ValueError:
        return 20.0


def _is_lock_error(exc: Exception) -> bool:
    text = str(exc).lower()
    return "lock" in text and ("could not set" in text or "conflicting" in text)


def _connect(path: Path, *, read_only: bool, wait: float | None = None) -> duckdb.DuckDBPyConnection:
    """Open the catalog file, retrying briefly while another process holds its lock."""
    deadline = time.monotonic() + (lock_wait_seconds() if wait is None else wait)
    delay = 0.02
    while True:
        try:
            return duckdb.connect(str(path), read_only=read_only)
        except duckdb.IOException as exc:
            if not _is_lock_error(exc):
                raise CatalogError(f"cannot open catalog {path}: {exc}") from exc
            if time.monotonic() >= deadline:
                holder = str(exc).split("Conflicting lock is held in", 1)[-1].strip()
                raise BusyError(
                    f"the warehouse at {path.parent} is busy: another process holds the catalog"
                    f" ({holder}); try again when it finishes"
                ) from exc
            time.sleep(delay)
            delay = min(delay * 2, 0.5)


def check_zone(zone: str) -> str:
    """Validate an IANA zone name (Europe/Berlin, UTC...)."""
    try:
        ZoneInfo(zone)
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise WarehouseError(f"unknown time zone {zone!r}: use an IANA name such as Europe/Berlin") from exc
    return zone


def init_home(home: Path, *, zone: str = "UTC") -> bool:
    """Create the home and its catalog; returns False when it already existed (zone must agree)."""
    check_zone(zone)
    catalog = home / CATALOG
    existed = catalog.exists()
    home.mkdir(parents=True, exist_ok=True)
    for sub in ("points", "quarantine", "staging"):
        (home / sub).mkdir(exist_ok=True)
    with writer(home, create=True) as con:
        current = con.execute("SELECT value FROM settings WHERE name = 'zone'").fetchone()
        if current is None:
            con.execute("INSERT INTO settings VALUES ('zone', ?)", [zone])
        elif existed and current[0] != zone:
            raise WarehouseError(
                f"{home} is already a warehouse with zone {current[0]}; its zone cannot change"
            )
    return not existed


@contextmanager
def writer(home: Path, *, create: bool = False, migrated: bool = False) -> Iterator[duckdb.DuckDBPyConnection]:
    """A short read-write connection to the catalog, migrated; closed on exit.

    `migrated=True` skips the schema check for callers that already made one (an ingest opens
    the catalog several times per file; each check costs a query).
    """
    catalog = home / CATALOG
    if not catalog.exists() and not create:
        raise CatalogError(f"no warehouse at {home}: run `warehouse --home {home} init` first")
    con = _connect(catalog, read_only=False)
    try:
        if not migrated:
            migrate(con)
        yield con
    finally:
        con.close()


class Warehouse:
    """An open warehouse: `con` answers SQL over the catalog and the points, with views and macros."""

    def __init__(self, home: Path, con: duckdb.DuckDBPyConnection, *, read_only: bool) -> None:
        self.home = home
        self.con = con
        self.read_only = read_only
        # Facts derived from this snapshot that readers may keep (e.g. Parquet row-group statistics).
        self.cache: dict[str, Any] = {}
        row = con.execute("SELECT value FROM settings WHERE name = 'zone'").fetchone()
        self.zone: str = row[0] if row else "UTC"

    def close(self) -> None:
        self.con.close()

    def __enter__(self) -> "Warehouse":
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.close()


def open_warehouse(home: str | os.PathLike[str] | None, *, read_only: bool = True, views: bool = True) -> Warehouse:
    """Open the warehouse at `home` (resolved as in resolve_home); read-only by default.

    `views=False` gives the catalog tables alone, which reading no Parquet file cannot fail
    (`warehouse check` must open a warehouse whose files are damaged).
    """
    root = resolve_home(home)
    catalog = root / CATALOG
    if not catalog.exists():
        raise CatalogError(f"no warehouse at {root}: run `warehouse --home {root} init` first")
    if read_only:
        con = _snapshot(catalog)
    else:
        con = _connect(catalog, read_only=False)
        migrate(con)
    try:
        if views:
            _install_views(con, root, read_only)
        return Warehouse(root, con, read_only=read_only)
    except Exception:
        con.close()
        raise


def _install_views(con: duckdb.DuckDBPyConnection, root: Path, read_only: bool) -> None:
    try:
        install(con, root, temporary=not read_only)
    except duckdb.Error as exc:
        raise CatalogError(f"cannot read the warehouse's files ({' '.join(str(exc).split())[:400]}): run"
                           f" `warehouse --home {root} check --deep` to find damaged or missing files") from exc


def _snapshot(catalog: Path) -> duckdb.DuckDBPyConnection:
    """An in-memory copy of the catalog tables, taken in one short read of the file."""
    probe = _connect(catalog, read_only=True)
    try:
        needs_migration = bool(pending(probe))
    finally:
        probe.close()
    if needs_migration:
        with writer(catalog.parent):
            pass
    con = duckdb.connect(":memory:")
    path = str(catalog).replace("'", "''")
    deadline = time.monotonic() + lock_wait_seconds()
    while True:
        try:
            con.execute(f"ATTACH '{path}' AS cat (READ_ONLY)")
            break
        except duckdb.Error as exc:
            if not _is_lock_error(exc) or time.monotonic() >= deadline:
                con.close()
                raise BusyError(f"the warehouse at {catalog.parent} is busy: {exc}") from exc
            time.sleep(0.05)
    try:
        con.execute("BEGIN TRANSACTION")
        tables = con.execute(
            "SELECT table_name FROM duckdb_tables() WHERE database_name = 'cat' AND schema_name = 'main'"
        ).fetchall()
        for (table,) in tables:
            name = quote_ident(table)
            con.execute(f"CREATE TABLE main.{name} AS FROM cat.main.{name}")
        con.execute("COMMIT")
    finally:
        con.execute("DETACH cat")
    return con
