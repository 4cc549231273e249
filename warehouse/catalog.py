"""Questions about what the warehouse holds: status, counters, consistency checks."""
from __future__ import annotations

import difflib
import os
import shutil
from pathlib import Path
from typing import Any

from warehouse.errors import UnknownCounterError
from warehouse.home import CATALOG, Warehouse

COUNTER_COLUMNS = ("key", "source", "host", "object", "instance", "counter", "unit", "kind",
                   "n", "first_ts", "last_ts")


# Keys escape a '/' inside a name as '\/'; people type "Disk Transfers/sec" as they read it, so
# selectors are also tried against the key with those escapes undone.
_PLAIN_KEY = r"replace(replace(key, '\/', '/'), '\\', '\')"


def match_counters(wh: Warehouse, selector: str) -> list[int]:
    """Counter ids whose key equals `selector`, else matches it as a case-insensitive glob.

    Both the key and its plain form (escapes undone) are tried.
    """
    exact = wh.con.execute(
        f"SELECT counter_id FROM counters WHERE key = $s OR {_PLAIN_KEY} = $s ORDER BY key",
        {"s": selector}).fetchall()
    if exact:
        return [r[0] for r in exact]
    rows = wh.con.execute(
        f"SELECT counter_id FROM counters WHERE lower(key) GLOB lower($s) OR lower({_PLAIN_KEY}) GLOB lower($s)"
        " ORDER BY key", {"s": selector}).fetchall()
    if not rows:
        raise UnknownCounterError(_no_match(wh, selector))
    return [r[0] for r in rows]


def _no_match(wh: Warehouse, selector: str) -> str:
    keys = [r[0] for r in wh.con.execute("SELECT key FROM counters").fetchall()]
    if not keys:
        return f"no counter matches {selector!r}: the warehouse holds no counters yet (run `warehouse ingest`)"
    near = difflib.get_close_matches(selector.strip("*"), keys, n=3, cutoff=0.5)
    hint = f"; did you mean {', '.join(repr(k) for k in near)}?" if near else "; list them with `warehouse counters`"
    return f"no counter matches {selector!r}{hint}"


def list_counters(wh: Warehouse, glob: str | None = None) -> list[dict[str, Any]]:
    """Counters (all, or those matching `glob`) with their sample count and time range."""
    ids = match_counters(wh, glob) if glob else None
    where = "WHERE c.counter_id IN (SELECT unnest(?::INTEGER[]))" if ids is not None else ""
    params = [ids] if ids is not None else []
    rows = wh.con.execute(f"""
        WITH stats AS (
            SELECT counter_id, count(*) AS n, min(ts) AS first_ts, max(ts) AS last_ts
            FROM points {"WHERE counter_id IN (SELECT unnest(?::INTEGER[]))" if ids is not None else ""}
            GROUP BY counter_id)
        SELECT c.key, c.source, c.host, c.object, c.instance, c.counter, c.unit, c.kind,
               coalesce(s.n, 0), s.first_ts, s.last_ts
        FROM counters c LEFT JOIN stats s USING (counter_id) {where}
        ORDER BY c.key, c.source""", params + params).fetchall()
    return [dict(zip(COUNTER_COLUMNS, r)) for r in rows]


def status(wh: Warehouse) -> dict[str, Any]:
    """Sources, counters, files, points, time range, bytes on disk and quarantined rows."""
    con = wh.con
    one = lambda sql: con.execute(sql).fetchone()  # noqa: E731
    files, rows_read, rows_loaded, quarantined, cells, values = one(
        "SELECT count(*), coalesce(sum(rows_read), 0), coalesce(sum(rows_loaded), 0),"
        " coalesce(sum(rows_quarantined), 0), coalesce(sum(cells_quarantined), 0),"
        " coalesce(sum(values_loaded), 0) FROM ingests")
    first, last = one("SELECT min(first_ts), max(last_ts) FROM ingests")
    parquet_bytes, parquet_files = one("SELECT coalesce(sum(bytes), 0), count(*) FROM ingest_files")
    return {
        "home": str(wh.home),
        "zone": wh.zone,
        "schema_version": one("SELECT max(version) FROM schema_version")[0],
        "sources": one("SELECT count(*) FROM sources")[0],
        "counters": one("SELECT count(*) FROM counter_defs")[0],
        "files_loaded": files,
        "parquet_files": parquet_files,
        "points": int(one("SELECT coalesce(sum(rows), 0) FROM ingest_files")[0]),
        "values_loaded": int(values),
        "rows_read": int(rows_read),
        "rows_loaded": int(rows_loaded),
        "rows_quarantined": int(quarantined),
        "cells_quarantined": int(cells),
        "first_ts": first,
        "last_ts": last,
        "bytes_on_disk": int(parquet_bytes) + _tree_bytes(wh.home / "quarantine") + _size(wh.home / CATALOG),
    }


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def _tree_bytes(root: Path) -> int:
    return sum(_size(Path(d) / f) for d, _, fs in os.walk(root) for f in fs)


def _pid_alive(pid_file: Path) -> bool:
    try:
        os.kill(int(pid_file.read_text().strip()), 0)
        return True
    except (OSError, ValueError):
        return False


def check(wh: Warehouse, *, fix: bool = False, deep: bool = False, repair: bool = False) -> dict[str, Any]:
    """Do catalog and files agree? Lists missing files, orphans and stale staging folders.

    Orphans are Parquet files no committed ingest lists (left by a crash between moving files
    into place and committing); they are invisible to queries. `fix` deletes orphans and staging
    folders whose writing process is gone, never a file the catalog lists. `deep` re-reads every
    listed file against its row count and checksum (warehouse/integrity.py); `repair` (implies
    `deep`) sets damaged and missing files aside and drops them from the catalog.
    """
    report = _shallow(wh, fix=fix)
    if not (deep or repair):
        return report
    from warehouse import integrity
    found = integrity.verify(wh)
    damaged = found["damaged"]
    report.update(deep=True, files_checked=found["files_checked"],
                  files_without_checksum=found["files_without_checksum"],
                  damaged=[d.as_dict() for d in damaged], repaired=[])
    if repair:
        report["repaired"] = integrity.repair(wh.home, damaged)
        report["missing"] = []
    report["ok"] = report["ok"] and not damaged
    return report


def _shallow(wh: Warehouse, *, fix: bool) -> dict[str, Any]:
    listed = {r[0] for r in wh.con.execute("SELECT relpath FROM ingest_files").fetchall()}
    listed |= {r[0] for r in wh.con.execute(
        "SELECT quarantine_file FROM ingests WHERE quarantine_file IS NOT NULL").fetchall()}
    on_disk = set()
    for sub in ("points", "quarantine"):
        for d, _, fs in os.walk(wh.home / sub):
            on_disk |= {(Path(d) / f).relative_to(wh.home).as_posix() for f in fs}
    live = {p.name for p in (wh.home / "staging").glob("*") if _pid_alive(p / "pid")}
    stale = sorted(p.name for p in (wh.home / "staging").glob("*") if p.name not in live)
    orphans = sorted(p for p in on_disk - listed if not any(Path(p).name.startswith(i) for i in live))
    missing = sorted(listed - on_disk)
    if fix:
        for rel in orphans:
            (wh.home / rel).unlink(missing_ok=True)
        for name in stale:
            shutil.rmtree(wh.home / "staging" / name, ignore_errors=True)
    return {"ok": not (orphans or missing or stale), "missing": missing, "orphans": orphans,
            "stale_staging": stale, "fixed": fix and bool(orphans or stale)}
