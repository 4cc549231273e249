"""Render rows and mappings as an aligned table, CSV or JSON (stable snake_case keys)."""
from __future__ import annotations

import csv
import datetime as dt
import io
import json
from collections.abc import Sequence
from typing import Any


def _jsonable(value: Any) -> Any:
    if isinstance(value, (dt.datetime, dt.date)):
        return value.isoformat()
    if isinstance(value, float) and value != value:
        return None
    if hasattr(value, "item"):
        return value.item()
    return value


def _text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, dt.datetime):
        return value.isoformat(sep=" ", timespec="seconds")
    return str(value)


def render_rows(rows: Sequence[dict[str, Any]], columns: Sequence[str], fmt: str) -> str:
    if fmt == "json":
        return json.dumps([{c: _jsonable(r[c]) for c in columns} for r in rows], indent=2, ensure_ascii=False)
    if fmt == "csv":
        buf = io.StringIO()
        out = csv.writer(buf, lineterminator="\n")
        out.writerow(columns)
        out.writerows([[_text(r[c]) for c in columns] for r in rows])
        return buf.getvalue().rstrip("\n")
    cells = [[_text(r[c]) for c in columns] for r in rows]
    widths = [max([len(c)] + [len(row[i]) for row in cells]) for i, c in enumerate(columns)]
    lines = ["  ".join(c.ljust(w) for c, w in zip(columns, widths)).rstrip()]
    lines.append("  ".join("-" * w for w in widths))
    lines += ["  ".join(v.ljust(w) for v, w in zip(row, widths)).rstrip() for row in cells]
    return "\n".join(lines)


def render_mapping(data: dict[str, Any], fmt: str) -> str:
    if fmt == "json":
        return json.dumps({k: _jsonable(v) for k, v in data.items()}, indent=2, ensure_ascii=False)
    if fmt == "csv":
        return render_rows([data], list(data), "csv")
    width = max(len(k) for k in data)
    return "\n".join(f"{k.ljust(width)}  {_text(v)}" for k, v in data.items())


