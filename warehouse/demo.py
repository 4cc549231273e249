"""`warehouse demo`: generate the invented scenario, load it, and show a few answers."""
from __future__ import annotations

import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

from warehouse import catalog
from warehouse.home import init_home, open_warehouse
from warehouse.ingest.run import IngestOptions, ingest_files
from warehouse.query import run_sql
from warehouse.render import render_rows

DEMO_ZONE = "Europe/Berlin"
DEMO_SOURCE = "claims-office"
EXAMPLES = (
    ("Busiest counters by average",
     "SELECT key, unit, count(*) AS n, round(avg(value), 2) AS mean FROM samples"
     " WHERE unit = '%' GROUP BY key, unit ORDER BY mean DESC LIMIT 5"),
    ("Storage array read latency by local hour (weekdays)",
     "SELECT hour(ts) AS hour, round(avg(value), 2) AS mean, round(quantile_cont(value, 0.95), 2) AS p95"
     " FROM samples WHERE key ILIKE '%read_latency%' AND dayofweek(ts) BETWEEN 1 AND 5"
     " GROUP BY 1 ORDER BY 1 LIMIT 24"),
    ("Hypervisor CPU, weekdays 08:00-18:00: the 95% Cantelli bound beside the observed p95 and peak",
     "SELECT host, round(avg(value), 1) AS mean, round(stddev_pop(value), 1) AS sd,"
     " round(cantelli_bound(avg(value), stddev_pop(value), 0.95), 1) AS bound_95,"
     " round(quantile_cont(value, 0.95), 1) AS p95, round(max(value), 1) AS peak"
     " FROM samples WHERE object = 'Processor' AND instance = '_Total'"
     " AND dayofweek(ts) BETWEEN 1 AND 5 AND hour(ts) BETWEEN 8 AND 17 GROUP BY host ORDER BY host"),
    ("What was quarantined, and why",
     "SELECT regexp_extract(file, '[^/]+$') AS file, line, column_name, reason FROM quarantine ORDER BY file, line"),
)


def run_demo(home: Path, *, scale: str = "small", keep_csv: Path | None = None,
             quiet: bool = False) -> Iterator[str]:
    """Yield the lines of the demo's story as it runs."""
    from seed.generate import generate

    init_home(home, zone=DEMO_ZONE)
    with tempfile.TemporaryDirectory(prefix="warehouse-demo-") as tmp:
        out = keep_csv or Path(tmp)
        started = time.monotonic()
        files = generate(out, scale=scale)
        yield f"generated {len(files)} CSV files of the invented claims office ({scale}) in {time.monotonic() - started:.1f} s"
        started = time.monotonic()
        # One collector folder per machine; the folder names the host for files whose headers do not.
        results = []
        for machine in sorted({f.parent for f in files}):
            batch = [f for f in files if f.parent == machine]
            results += ingest_files(home, batch, IngestOptions(source=DEMO_SOURCE, host=machine.name))
        for r in results:
            if r.status == "failed":
                yield f"  failed: {r.message}"
        loaded = [r for r in results if r.status == "loaded"]
        yield (f"ingested {len(loaded)} files in {time.monotonic() - started:.1f} s:"
               f" {sum(r.values_loaded for r in loaded):,} values,"
               f" {sum(r.rows_quarantined for r in loaded)} rows and"
               f" {sum(r.cells_quarantined for r in loaded)} cells quarantined"
               f" ({sum(r.status == 'skipped' for r in results)} skipped as already loaded)")
    with open_warehouse(home) as wh:
        yield ""
        yield "status:"
        for key, value in catalog.status(wh).items():
            yield f"  {key}: {value}"
        for title, sql in EXAMPLES:
            yield ""
            yield f"-- {title}"
            yield f"warehouse --home {home} sql \"{sql}\""
            table = run_sql(wh, sql)
            yield from _table_lines(table.to_pylist(), table.column_names)
    yield ""
    yield ("Cautions: the Cantelli bound holds for any distribution, so it can sit above the observed peak;"
           " it describes the observed period only: repeat it on other periods before buying.")
    yield f"Next: warehouse --home {home} counters '*latency*'"


def _table_lines(rows: list[dict], columns: list[str]) -> Iterator[str]:
    yield from render_rows(rows, columns, "table").splitlines()
