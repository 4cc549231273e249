"""`warehouse demo`: generate the invented scenario, load it, and tell its whole story.

After the load: size the shared storage on its busiest hours, find the CPU spikes and their
suspect, the counter that moves before the read latency, the destage period and the level shift,
compare the weeks around the shift, roll up and follow the trend, list what changed, write one
HTML report, and print where it is with three headline findings.
"""
from __future__ import annotations

import tempfile
import time
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path
from typing import Any

from warehouse import catalog
from warehouse.errors import WarehouseError
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
             quiet: bool = False, report: Path | None = None) -> Iterator[str]:
    """Yield the lines of the demo's story as it runs."""
    from seed.generate import generate

    from seed.generate import SERVICE_LEVELS_TOML

    init_home(home, zone=DEMO_ZONE)
    levels = home / "limits.toml"
    if not levels.exists():   # the office's own service levels; a user's edited file is kept
        levels.write_text(SERVICE_LEVELS_TOML, encoding="utf-8")
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
    yield ""
    from seed.generate import SCALES
    yield from tell_story(home, report or home / "report.html", lead_bucket=f"{SCALES[scale].interval_s}s")
    yield ""
    yield f"Next: warehouse --home {home} counters '*latency*'"
    yield (f"      warehouse --home {home} limits --period 2026-W11"
           f"   (the office's own levels: {home / 'limits.toml'})")


def _table_lines(rows: list[dict], columns: list[str]) -> Iterator[str]:
    yield from render_rows(rows, columns, "table").splitlines()


# -- the story ---------------------------------------------------------------------------------------------

STORAGE = "san01/pool=*/*_iops"
HOST_CPU = "vdi-hv02/Processor/_Total/% Processor Time"
READ_LATENCY = "san01/pool=vdi/read_latency_ms"
WRITE_LATENCY = "san01/pool=vdi/write_latency_ms"
POOL_READS = "san01/pool=vdi/read_iops"
# The read IO/s the array's vdi pool is rated for: a figure invented for the demo, like the rest.
POOL_READ_CAPACITY = 15000.0


def _lasting_rise(wh: Any, selector: str) -> dict[str, Any] | None:
    """The day from which the weekday means of `selector` stayed higher, if they did.

    Hourly change points also mark every evening and morning of a strong office rhythm; one mean
    per weekday leaves the rhythm out, and sizing.level_shift takes the split of those means with
    the largest standardised difference, if clear (Mann-Whitney p < 0.001, more than one pooled sd)."""
    import numpy as np
    import pandas as pd

    from warehouse.patterns import PatternRequest
    from warehouse.plotdata import patterns_series
    from warehouse.sizing import level_shift

    series = patterns_series(wh, PatternRequest(selector))
    local = pd.DatetimeIndex(pd.to_datetime(series.times, unit="us", utc=True)).tz_convert(series.zone)
    weekday = np.asarray(local.day_of_week < 5)
    daily = pd.Series(series.values[weekday]).groupby(np.asarray(local.date)[weekday]).mean().dropna()
    found = level_shift(daily.to_numpy())
    if found is None or found[2] <= found[1]:
        return None
    day = pd.Timestamp(daily.index[found[0]]).tz_localize(series.zone)
    return {"ts": day.to_pydatetime(), "before_mean": found[1], "after_mean": found[2]}


def _iso_week(day: Any) -> str:
    year, week, _ = day.isocalendar()
    return f"{year}-W{week:02d}"


def _weeks_around(ts: Any) -> tuple[str, str]:
    """The whole week before the shift, and the first whole week after it (its own week when it
    starts on the Monday)."""
    after = ts if ts.weekday() == 0 else ts + timedelta(days=7 - ts.weekday())
    return _iso_week(after - timedelta(days=7)), _iso_week(after)


def _first_outside(results: list[dict[str, Any]], target: str) -> dict[str, Any]:
    """The strongest suspect that is not a part of the target's own object: per-core processor
    counters move with the host's total by construction and say nothing about the cause."""
    own = target.rsplit("/", 2)[0] + "/"
    return next((row for row in results if not row["key"].startswith(own)), results[0])


def _longest(episodes: list[dict[str, Any]]) -> dict[str, Any]:
    return max(episodes, key=lambda e: (e["seconds"], e["peak"]))


def tell_story(home: Path, report_path: Path, *, lead_bucket: str = "60s") -> Iterator[str]:
    """Run each analysis on the loaded scenario, write the report, yield the story line by line.

    `lead_bucket` is the sampling interval: a lead of a few samples shows only in buckets that short."""
    from warehouse.changes import ChangesRequest
    from warehouse.compare import CompareRequest
    from warehouse.correlate import CorrelateRequest
    from warehouse.patterns import PatternRequest
    from warehouse.report import Report, data_facts, section, to_html
    from warehouse.rollup import RollupRequest, rollup
    from warehouse.sizing import SizeRequest
    from warehouse.trend import TrendRequest

    started = time.monotonic()
    summary = rollup(home, RollupRequest(("week",), "due"))[0]
    yield (f"rolled up weekly summaries: {summary['rows']} rows over {summary['periods']} week(s)" if summary["rows"]
           else "weekly summaries already current")
    sections = []
    with open_warehouse(home) as wh:
        def step(analysis: Any) -> Any:
            s = section(wh, analysis)
            sections.append(s)
            return s

        sized = step(SizeRequest(STORAGE, combine="sum", window="busiest-hours", days="mon-fri"))
        yield f"1. size the shared storage on busiest hours: {sized.reading[0]}"
        spikes = step(PatternRequest(HOST_CPU, above="p99", max_period="2h"))
        spell = _longest(spikes.result["episodes"])
        yield (f"2. CPU spikes on vdi-hv02: {len(spikes.result['episodes'])} spells above its p99; the longest"
               f" {spell['start']:%a %d %b %H:%M}-{spell['end']:%H:%M}")
        suspects = step(CorrelateRequest(HOST_CPU, start=(spell["start"] - timedelta(hours=1)).isoformat(),
                                         end=(spell["start"] + timedelta(hours=2)).isoformat()))
        outside = _first_outside(suspects.result["results"], HOST_CPU)
        yield (f"   first suspect outside the host's own processor counters: {outside['key']}"
               f" (r {outside['r']:+.2f}, q {outside['q']:.2g})")
        lead = step(CorrelateRequest(READ_LATENCY, bucket=lead_bucket, max_lag=5))
        yield f"3. what moves before the read latency: {lead.reading[0]}"
        destage = step(PatternRequest(WRITE_LATENCY, max_period="2h"))
        yield f"4. {destage.reading[0]}"
        shift = step(PatternRequest(POOL_READS))
        rise = _lasting_rise(wh, POOL_READS)
        yield f"5. {shift.reading[0]}"
        compared = None
        if rise is not None:
            before, after = _weeks_around(rise["ts"])
            yield (f"   weekday means stayed higher from {rise['ts']:%a %d %b %Y} ({rise['before_mean']:,.0f} before,"
                   f" {rise['after_mean']:,.0f} after); comparing {before} with {after}")
            compared = step(CompareRequest(POOL_READS, before, after))
            yield f"   {compared.reading[0]}"
            try:
                step(ChangesRequest(period=after, history=8))
            except WarehouseError as exc:   # too little history before that week: say so, go on
                yield f"   what changed in {after}: not listed ({exc})"
        trend = step(TrendRequest(POOL_READS, capacity=POOL_READ_CAPACITY))
        yield f"6. {trend.reading[0]}"
        report = Report("Quillbrook Mutual Claims, Tannerfield office: the demo's story", data_facts(wh), sections)
    report_path = Path(report_path)
    report_path.write_text(to_html(report), encoding="utf-8")
    yield ""
    yield f"report: {report_path.resolve()} ({len(sections)} sections, {time.monotonic() - started:.1f} s)"
    yield "headline findings:"
    for k, text in enumerate(headlines(suspects.result, spell, lead.result, destage.result, rise,
                                       compared.result if compared else None), 1):
        yield f"  {k}. {text}"


def headlines(suspects: dict[str, Any], spell: dict[str, Any], lead: dict[str, Any], destage: dict[str, Any],
              rise: dict[str, Any] | None, compared: dict[str, Any] | None) -> list[str]:
    """The three findings worth a meeting: the spikes' suspect (and what leads the latency), the
    storage's periodic pulse, and the level shift with its size."""
    from warehouse.plot import lag_words

    first, leader = _first_outside(suspects["results"], HOST_CPU), lead["results"][0]
    out = [f"vdi-hv02's CPU spikes ({spell['start']:%a %H:%M}, {(spell['end'] - spell['start']).seconds // 60} min):"
           f" first suspect {first['key']} (r {first['r']:+.2f}, {lag_words(first['lag'], suspects['bucket_seconds'])});"
           f" the read latency follows {leader['key']}, which {lag_words(leader['lag'], lead['bucket_seconds'])}"
           f" (r {leader['r']:+.2f})"]
    period = destage["periods"][0] if destage["periods"] else None
    out.append(f"{destage['selector']} pulses every {period['label']} ({period['strength']:.0%} of its variance):"
               " a periodic flush such as a cache destage" if period else f"no period found in {destage['selector']}")
    if rise is None or compared is None:
        out.append(f"no lasting rise found in {POOL_READS}")
    else:
        b, a = compared["before"], compared["after"]
        out.append(f"{POOL_READS} rose from {rise['ts']:%a %d %b %Y}: median {b['p50']:,.0f} in {b['period']},"
                   f" {a['p50']:,.0f} in {a['period']} ({(a['p50'] / b['p50'] - 1) * 100:+.0f}%), p95 {b['p95']:,.0f}"
                   f" -> {a['p95']:,.0f}")
    return out
