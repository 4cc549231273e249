"""Run user SQL: read-only unless the caller asks to write.

Two walls stand between a read-only query and the disk. The first looks at each statement's
type (and inside EXPLAIN, at the statement it explains, since EXPLAIN ANALYZE runs it). The
second holds even if the first is fooled: before the first user statement, the connection is
told it may open only the warehouse's own committed files, and its configuration is locked, so
no COPY, ATTACH, INSTALL, LOAD or settings change can reach another path.
"""
from __future__ import annotations

import re

import duckdb
import pyarrow as pa

from warehouse.errors import ReadOnlyError, WarehouseError
from warehouse.home import Warehouse

_READ_TYPES = {"SELECT", "EXPLAIN", "PRAGMA"}
# PRAGMAs that only describe; others (profiling, checkpoints, storage changes) are refused.
_READ_PRAGMAS = {"table_info", "show", "show_tables", "show_tables_expanded", "show_databases",
                 "database_list", "database_size", "storage_info", "metadata_info", "version",
                 "platform", "functions", "collations", "user_agent"}
_COMMENTS = re.compile(r"\s*(--[^\n]*(\n|$)|/\*.*?\*/)\s*", re.S)
_EXPLAIN = re.compile(r"EXPLAIN\s+(\([^)]*\)\s*)?(ANALYZE\s+)?", re.I)
_PRAGMA = re.compile(r"PRAGMA\s+(\w+)", re.I)
_SEALED = "query.sealed"


def statement_types(sql: str) -> list[str]:
    try:
        return [s.type.name for s in duckdb.extract_statements(sql)]
    except duckdb.Error as exc:
        raise WarehouseError(f"SQL error: {' '.join(str(exc).split())}") from exc


def _lead(text: str) -> str:
    """The statement without its leading comments and blanks."""
    while True:
        match = _COMMENTS.match(text)
        if not match or not match.group(0):
            return text.lstrip()
        text = text[match.end():]


def refused_kind(statement: duckdb.Statement) -> str | None:
    """What makes `statement` a change (its type, or a describing name), or None for a pure read."""
    kind = statement.type.name
    if kind not in _READ_TYPES:
        return kind
    text = _lead(statement.query)
    if kind == "EXPLAIN":
        match = _EXPLAIN.match(text)
        inner = duckdb.extract_statements(text[match.end():]) if match else []
        if not inner:
            return "EXPLAIN"  # not a form we can see inside: refuse rather than guess
        found = [refused_kind(s) for s in inner]
        return next((f"EXPLAIN {k}" for k in found if k), None)
    if kind == "PRAGMA":
        match = _PRAGMA.match(text)
        name = match[1].lower() if match else ""
        return None if name in _READ_PRAGMAS else f"PRAGMA {name}".rstrip()
    return None


def _seal(wh: Warehouse) -> None:
    """Let this connection open only the warehouse's committed files, and lock that setting."""
    if wh.cache.get(_SEALED):
        return
    files = [r[0] for r in wh.con.execute("SELECT relpath FROM ingest_files").fetchall()]
    files += [r[0] for r in wh.con.execute(
        "SELECT quarantine_file FROM ingests WHERE quarantine_file IS NOT NULL").fetchall()]
    wh.con.execute("SET allowed_paths = ?", [[str(wh.home / rel) for rel in files]])
    wh.con.execute("SET enable_external_access = false")
    wh.con.execute("SET autoinstall_known_extensions = false")
    wh.con.execute("SET autoload_known_extensions = false")
    wh.con.execute("SET lock_configuration = true")
    wh.cache[_SEALED] = True


def run_sql(wh: Warehouse, sql: str) -> pa.Table:
    """Execute every statement; return the last one's result. Refuses writes on a read-only open."""
    kinds = statement_types(sql)
    if not kinds:
        raise WarehouseError("no SQL statement given")
    statements = duckdb.extract_statements(sql)
    if wh.read_only:
        refused = [k for k in map(refused_kind, statements) if k]
        if refused:
            raise ReadOnlyError(
                f"{refused[0]} statements change things and `warehouse sql` is read-only: add --write"
                " to change the warehouse")
        _seal(wh)
    *first, last = statements
    for statement in first:
        wh.con.execute(statement)
    wh.con.complete()  # a result left unread by execute() would block sql() below
    relation = wh.con.sql(last.query)
    return pa.table({}) if relation is None else relation.to_arrow_table()
