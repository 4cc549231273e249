"""Deep checks of the files on disk against what the catalog recorded at ingest, and repair.

A file is damaged when its bytes no longer match the sha256 recorded when it was written, when
its row count differs from the catalog's, or when it cannot be decoded. Repair sets a damaged (or
missing) file aside under `damaged/` and drops it from the catalog in one transaction, so every
query keeps working on what is left; the catalog keeps a row per file saying what was lost and
which input file to load again.
"""
from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from warehouse.home import Warehouse, writer

DAMAGED = "damaged"


@dataclass(frozen=True)
class Damage:
    relpath: str
    ingest_id: str
    kind: str            # 'points' or 'quarantine'
    day: Any             # date of a points file, else None
    rows: int | None     # rows the catalog recorded
    source_path: str     # the input file of that ingest
    reason: str

    def as_dict(self) -> dict[str, Any]:
        return {"relpath": self.relpath, "ingest_id": self.ingest_id, "kind": self.kind, "day": self.day,
                "rows": self.rows, "source_path": self.source_path, "reason": self.reason}


def _sha256(path: Path) -> str:
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def _recorded(wh: Warehouse) -> list[tuple[str, str, str, Any, int | None, str | None, str]]:
    """(relpath, ingest_id, kind, day, rows, sha256, source path) of every committed file."""
    return wh.con.execute("""
        SELECT f.relpath, f.ingest_id, 'points', f.day, f.rows, f.sha256, i.path
        FROM ingest_files f JOIN ingests i USING (ingest_id)
        UNION ALL
        SELECT quarantine_file, ingest_id, 'quarantine', NULL, NULL, quarantine_sha256, path
        FROM ingests WHERE quarantine_file IS NOT NULL
        ORDER BY 1""").fetchall()


def _problem(path: Path, rows: int | None, sha: str | None) -> str | None:
    """Why the file at `path` is damaged, or None. A file without a recorded checksum is decoded
    whole instead (every page read), which finds most damage but not all."""
    if not path.exists():
        return "missing"
    if sha and _sha256(path) != sha:
        return "checksum differs from the one recorded at ingest"
    try:
        meta = pq.ParquetFile(path)
        if rows is not None and meta.metadata.num_rows != rows:
            return f"holds {meta.metadata.num_rows} rows, the catalog recorded {rows}"
        if not sha:
            for i in range(meta.num_row_groups):
                meta.read_row_group(i)
    except (OSError, pa.ArrowException) as exc:
        return f"unreadable: {' '.join(str(exc).split())[:200]}"
    return None


def verify(wh: Warehouse) -> dict[str, Any]:
    """Re-read every committed file: row counts, checksums, decodability."""
    damaged: list[Damage] = []
    unverified = 0
    files = _recorded(wh)
    for rel, ingest_id, kind, day, rows, sha, source in files:
        unverified += not sha
        reason = _problem(wh.home / rel, rows, sha)
        if reason:
            damaged.append(Damage(rel, ingest_id, kind, day, rows, source, reason))
    return {"files_checked": len(files), "files_without_checksum": unverified, "damaged": damaged}


def _aside(home: Path, rel: str) -> str | None:
    """Move a damaged file under damaged/ (same relative path; never over an earlier one)."""
    source = home / rel
    if not source.exists():
        return None
    target = Path(DAMAGED) / rel
    n = 1
    while (home / target).exists():
        target = Path(DAMAGED) / f"{rel}.{n}"
        n += 1
    (home / target).parent.mkdir(parents=True, exist_ok=True)
    os.replace(source, home / target)
    return target.as_posix()


def repair(home: Path, damaged: list[Damage]) -> list[dict[str, Any]]:
    """Drop damaged files from the catalog (one transaction), then move them aside.

    The catalog changes first: a crash before the move leaves an unlisted file, which queries
    never see and `check --fix` removes. The ingests the files came from are marked unseen by
    the rollups, so `rollup --due` recomputes their periods without them.
    """
    if not damaged:
        return []
    with writer(home) as con:
        con.execute("BEGIN TRANSACTION")
        try:
            for d in damaged:
                if d.kind == "points":
                    con.execute("DELETE FROM ingest_files WHERE relpath = ?", [d.relpath])
                else:
                    con.execute("UPDATE ingests SET quarantine_file = NULL, quarantine_sha256 = NULL"
                                " WHERE ingest_id = ?", [d.ingest_id])
                con.execute("DELETE FROM rollup_seen WHERE ingest_id = ?", [d.ingest_id])
                con.execute("INSERT INTO damaged_files VALUES (?, ?, ?, ?, ?, ?, ?, ?, now())",
                            [d.relpath, _planned(home, d), d.ingest_id, d.kind, d.day, d.rows, d.source_path,
                             d.reason])
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise
    out = []
    for d in damaged:
        moved = _aside(home, d.relpath)
        out.append(dict(d.as_dict(), moved_to=moved, lost=_lost(d, moved)))
    return out


def _planned(home: Path, d: Damage) -> str | None:
    if not (home / d.relpath).exists():
        return None
    target, n = Path(DAMAGED) / d.relpath, 1
    while (home / target).exists():
        target, n = Path(DAMAGED) / f"{d.relpath}.{n}", n + 1
    return target.as_posix()


def _lost(d: Damage, moved: str | None) -> str:
    where = f"set aside as {moved}" if moved else "dropped from the catalog"
    what = (f"{d.rows} points of {d.day} (UTC) from ingest {d.ingest_id}" if d.kind == "points"
            else f"the quarantine rows of ingest {d.ingest_id}")
    return (f"{d.relpath} {where}: {what} are no longer visible; load {d.source_path} again with"
            " `warehouse ingest --replace` to restore them")
