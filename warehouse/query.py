"""Run user SQL: read-only unless the caller asks to write."""
from __future__ import annotations

import duckdb
import pyarrow as pa

from warehouse.errors import ReadOnlyError, WarehouseError
from warehouse.home import Warehouse

_READ_TYPES = {"SELECT", "EXPLAIN", "PRAGMA"}


def statement_types(sql: str) -> list[str]:
    try:
        return [s.type.name for s in duckdb.extract_statements(sql)]
    except duckdb.Error as exc:
        raise WarehouseError(f"SQL error: {exc}") from exc


def run_sql(wh: Warehouse, sql: str) -> pa.Table:
    """Execute every statement; return the last one's result. Refuses writes on a read-only open."""
    kinds = statement_types(sql)
    if not kinds:
        raise WarehouseError("no SQL statement given")
    if wh.read_only:
        refused = [k for k in kinds if k not in _READ_TYPES]
        if refused:
            raise ReadOnlyError(
                f"{refused[0]} statements change things and `warehouse sql` is read-only: add --write"
                " to change the warehouse")
    *first, last = duckdb.extract_statements(sql)
    for statement in first:
        wh.con.execute(statement)
    wh.con.complete()  # a result left unread by execute() would block sql() below
    relation = wh.con.sql(last.query)
    return pa.table({}) if relation is None else relation.to_arrow_table()
