"""Counter keys, safe slugs, and resolving counter names to catalog ids."""
from __future__ import annotations

import hashlib
import re
import unicodedata

import duckdb
import numpy as np
import pyarrow as pa

from warehouse.ingest.model import CounterName

_SEP = "/"
_SLUG_BAD = re.compile(r"[^a-z0-9]+")


def escape_part(part: str) -> str:
    """Backslash-escape the separator and the escape character so keys split unambiguously."""
    return part.replace("\\", "\\\\").replace(_SEP, "\\" + _SEP)


def make_key(name: CounterName) -> str:
    """The canonical key: host/object/instance/counter, empty parts left out, '/' and '\\' escaped."""
    parts = (name.host, name.object, name.instance, name.counter)
    return _SEP.join(escape_part(p) for p in parts if p)


def split_key(key: str) -> list[str]:
    """Inverse of the escaping in make_key: the non-empty parts, in order."""
    parts, current, i = [], [], 0
    while i < len(key):
        ch = key[i]
        if ch == "\\" and i + 1 < len(key):
            current.append(key[i + 1])
            i += 2
            continue
        if ch == _SEP:
            parts.append("".join(current))
            current = []
        else:
            current.append(ch)
        i += 1
    parts.append("".join(current))
    return parts


def slugify(text: str, *, limit: int = 48) -> str:
    """A folder-safe name made by the warehouse: [a-z0-9-] plus a hash when anything was lost."""
    ascii_text = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode()
    slug = _SLUG_BAD.sub("-", ascii_text.lower()).strip("-")[:limit].strip("-")
    if slug != text or not slug:
        digest = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:8]
        slug = f"{slug}-{digest}" if slug else f"x-{digest}"
    return slug


def source_id(con: duckdb.DuckDBPyConnection, name: str) -> int:
    """The id of source `name`, created on first use (call inside a write transaction)."""
    row = con.execute("SELECT source_id FROM sources WHERE name = ?", [name]).fetchone()
    if row:
        return int(row[0])
    slug = slugify(name)
    taken = {r[0] for r in con.execute("SELECT slug FROM sources").fetchall()}
    if slug in taken:
        slug = slugify(name + "#" + str(len(taken)))
    new = con.execute("SELECT nextval('source_ids')").fetchone()[0]
    con.execute("INSERT INTO sources VALUES (?, ?, ?, now())", [new, name, slug])
    return int(new)


def resolve_counters(con: duckdb.DuckDBPyConnection, source: int, names: list[CounterName],
                     kinds: list[str]) -> np.ndarray:
    """Catalog ids (int32) for `names`, registering the new ones; one round trip each way."""
    if not names:
        return np.zeros(0, dtype=np.int32)
    wanted = pa.table({
        "pos": pa.array(range(len(names)), pa.int64()),
        "host": [n.host for n in names], "object": [n.object for n in names],
        "instance": [n.instance for n in names], "counter": [n.counter for n in names],
        "unit": [n.unit for n in names], "kind": kinds,
        "key": [make_key(n) for n in names],
    })
    con.complete()  # a half-read result from the caller would block register()
    con.register("wanted_counters", wanted)
    try:
        con.execute("""
            INSERT INTO counter_defs
            SELECT nextval('counter_ids'), ?, w.host, w.object, w.instance, w.counter, w.unit, w.kind, w.key
            FROM (SELECT DISTINCT ON (host, object, instance, counter) * FROM wanted_counters ORDER BY pos) w
            WHERE NOT EXISTS (
                SELECT 1 FROM counter_defs c WHERE c.source_id = ? AND c.host = w.host
                AND c.object = w.object AND c.instance = w.instance AND c.counter = w.counter)
            ORDER BY w.pos""", [source, source])
        ids = con.execute("""
            SELECT c.counter_id FROM wanted_counters w JOIN counter_defs c
              ON c.source_id = ? AND c.host = w.host AND c.object = w.object
             AND c.instance = w.instance AND c.counter = w.counter
            ORDER BY w.pos""", [source]).fetchnumpy()["counter_id"]
    finally:
        con.unregister("wanted_counters")
    return np.asarray(ids, dtype=np.int32)
