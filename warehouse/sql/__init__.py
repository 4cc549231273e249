"""The SQL surface: views over the committed Parquet files, and the statistical macros."""
from __future__ import annotations

from importlib import resources
from pathlib import Path

import duckdb


def quote_ident(name: str) -> str:
    """Quote an identifier for DuckDB (the one place identifiers are quoted)."""
    return '"' + name.replace('"', '""') + '"'


def quote_literal(text: str) -> str:
    """Quote a string literal; only for text SQL cannot take as a parameter (view bodies)."""
    if "\x00" in text:
        raise ValueError("NUL in SQL literal")
    return "'" + text.replace("'", "''") + "'"


def _parquet_list(home: Path, relpaths: list[str]) -> str:
    return "[" + ", ".join(quote_literal(str(home / rel)) for rel in relpaths) + "]"


_EMPTY_POINTS = "SELECT NULL::TIMESTAMPTZ AS ts, NULL::INTEGER AS counter_id, NULL::DOUBLE AS value WHERE false"
_EMPTY_QUARANTINE = (
    "SELECT NULL::VARCHAR AS ingest_id, NULL::VARCHAR AS file, NULL::BIGINT AS line,"
    " NULL::VARCHAR AS column_name, NULL::VARCHAR AS raw, NULL::VARCHAR AS reason WHERE false"
)


def install(con: duckdb.DuckDBPyConnection, home: Path, *, temporary: bool) -> None:
    """Create counters/points/samples/quarantine views and the macros on this connection.

    The points view lists exactly the files committed in ingest_files, so a file moved into
    place by an ingest that crashed before its commit is never visible.
    """
    kind = "TEMP VIEW" if temporary else "VIEW"
    zone = con.execute("SELECT value FROM settings WHERE name = 'zone'").fetchone()
    con.execute(f"SET TimeZone = {quote_literal(zone[0] if zone else 'UTC')}")
    files = [r[0] for r in con.execute("SELECT relpath FROM ingest_files ORDER BY relpath").fetchall()]
    points = (
        f"SELECT ts, counter_id, value FROM read_parquet({_parquet_list(home, files)})"
        if files else _EMPTY_POINTS
    )
    quarantined = [r[0] for r in con.execute(
        "SELECT quarantine_file FROM ingests WHERE quarantine_file IS NOT NULL ORDER BY 1").fetchall()]
    quarantine = (
        f"SELECT ingest_id, file, line, column_name, raw, reason FROM read_parquet({_parquet_list(home, quarantined)})"
        if quarantined else _EMPTY_QUARANTINE
    )
    con.execute(f"""CREATE OR REPLACE {kind} counters AS
        SELECT c.counter_id, s.name AS source, c.host, c.object, c.instance, c.counter,
               c.unit, c.kind, c.key
        FROM counter_defs c JOIN sources s USING (source_id)""")
    con.execute(f"CREATE OR REPLACE {kind} points AS {points}")
    con.execute(f"""CREATE OR REPLACE {kind} samples AS
        SELECT p.ts, c.key, c.source, c.host, c.object, c.instance, c.counter, c.unit, p.value
        FROM points p JOIN counters c USING (counter_id)""")
    con.execute(f"CREATE OR REPLACE {kind} quarantine AS {quarantine}")
    macros = resources.files("warehouse.sql").joinpath("macros.sql").read_text(encoding="utf-8")
    con.execute(macros.replace("CREATE OR REPLACE MACRO", "CREATE OR REPLACE TEMP MACRO"))
    from warehouse.sql.udf import register
    register(con)
