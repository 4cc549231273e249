"""The `warehouse` command: parse options, call one library function, render the result."""
from __future__ import annotations

import functools
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import click
import duckdb

from warehouse import catalog, migrate as migrations
from warehouse.render import render_check, render_mapping, render_rows
from warehouse.errors import WarehouseError
from warehouse.home import init_home, open_warehouse, resolve_home, writer

FORMATS = click.Choice(["table", "json", "csv"])


class Ctx:
    def __init__(self, home: str | None, quiet: bool, engine: str = "duckdb", spark_master: str = "local[*]") -> None:
        self.home = resolve_home(home)
        self.quiet = quiet
        self.engine_name = engine
        self.spark_master = spark_master

    def engine(self) -> Any:
        from warehouse.engine import Engine
        return Engine(self.engine_name, self.spark_master)


def handle_errors(fn: Callable[..., Any]) -> Callable[..., Any]:
    """Turn library and database errors into one line and exit code 1."""
    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except WarehouseError as exc:
            raise click.ClickException(str(exc)) from exc
        except duckdb.Error as exc:
            raise click.ClickException(_with_damage_hint(" ".join(str(exc).split()))) from exc
        except OSError as exc:
            # a Parquet file of the warehouse damaged on disk fails deep inside a reader
            raise click.ClickException(_with_damage_hint(" ".join(str(exc).split()))) from exc
        except Exception as exc:
            if type(exc).__module__.split(".")[0] == "pyarrow":   # ArrowInvalid and kin: a damaged file
                raise click.ClickException(_with_damage_hint(" ".join(str(exc).split()))) from exc
            # --engine spark: a failed Spark job (py4j / pyspark errors) is one line too
            if type(exc).__module__.split(".")[0] not in ("pyspark", "py4j"):
                raise
            first = next((line for line in str(exc).splitlines() if line.strip()), type(exc).__name__)
            raise click.ClickException(f"Spark: {first.strip()}") from exc
    return wrapper


_DAMAGE_SIGNS = ("thrift", "parquet", "don't know what type", "no files found that match", "magic bytes")


def _with_damage_hint(text: str) -> str:
    if any(sign in text.lower() for sign in _DAMAGE_SIGNS):
        return f"{text} (a damaged or missing warehouse file? `warehouse check --deep` finds it)"
    return text


# -- commands ------------------------------------------------------------------------------------
@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--home", envvar="WAREHOUSE_HOME", metavar="DIR",
              help="Warehouse folder (default: $WAREHOUSE_HOME, else ./warehouse-data).")
@click.option("--quiet", "-q", is_flag=True, help="No progress bars.")
@click.option("--engine", type=click.Choice(["duckdb", "spark"]), default="duckdb", show_default=True,
              envvar="WAREHOUSE_ENGINE", help="What reads the points for rollup, size and correlate (target-vs-all);"
              " spark needs the [spark] extra and Java.")
@click.option("--spark-master", default="local[*]", show_default=True, metavar="URL", envvar="WAREHOUSE_SPARK_MASTER",
              help="Spark master for --engine spark, e.g. spark://head:7077, yarn, or local[*].")
@click.pass_context
def cli(ctx: click.Context, home: str | None, quiet: bool, engine: str, spark_master: str) -> None:
    """Bulk-load performance-counter CSV exports and ask sizing and troubleshooting questions.

    \b
    Example:
      warehouse --home ./wh init --zone Europe/Berlin
      warehouse --home ./wh ingest exports/*.csv --source office-hosts
      warehouse --home ./wh --engine spark --spark-master spark://head:7077 rollup --all
    """
    ctx.obj = Ctx(home, quiet, engine, spark_master)


pass_ctx = click.make_pass_decorator(Ctx)


@cli.command()
@click.option("--zone", default="UTC", show_default=True, help="IANA time zone for showing times and local-time files.")
@pass_ctx
@handle_errors
def init(ctx: Ctx, zone: str) -> None:
    """Create a warehouse (catalog and folders) in --home.

    \b
    Example:
      warehouse --home ./wh init --zone Europe/Berlin
    """
    created = init_home(ctx.home, zone=zone)
    click.echo(f"{'created' if created else 'already a warehouse:'} {ctx.home} (zone {zone})")


@cli.command()
@click.option("--list", "list_", is_flag=True, help="Show applied and pending migrations; apply nothing.")
@pass_ctx
@handle_errors
def migrate(ctx: Ctx, list_: bool) -> None:
    """Apply pending catalog migrations (opening a warehouse also does this).

    \b
    Example:
      warehouse --home ./wh migrate --list
    """
    with writer(ctx.home) as con:
        done = set(migrations.applied(con))
        for m in migrations.available():
            state = "applied" if m.version in done else "pending"
            if list_:
                click.echo(f"{m.version:04d}_{m.name}  {state}  {m.description}")
        if not list_:
            click.echo(f"schema version {max(done) if done else 0}; nothing pending")


@cli.command()
@click.argument("files", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--source", default="default", show_default=True, help="Name of the collection these files belong to.")
@click.option("--layout", type=click.Choice(["wide", "counter-paths", "long", "activity"]), help="Force the layout.")
@click.option("--delimiter", help="Force the field delimiter (e.g. ';' or '\\t').")
@click.option("--decimal", type=click.Choice([".", ","]), help="Force the decimal mark.")
@click.option("--time-format", help="iso, mdy, dmy, ymd-utc, epoch_s, epoch_ms or a strptime pattern.")
@click.option("--tz", help="Zone of local times in the files (default: the warehouse's zone).")
@click.option("--host", default="", help="Host name for wide files whose headers carry none.")
@click.option("--cumulative", multiple=True, metavar="GLOB", help="Counters (key globs) that are running totals; stored as per-second rates.")
@click.option("--replace", is_flag=True, help="Load files again even if the same content was loaded before.")
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True)
@pass_ctx
@handle_errors
def ingest(ctx: Ctx, files: tuple[Path, ...], source: str, layout: str | None, delimiter: str | None,
           decimal: str | None, time_format: str | None, tz: str | None, host: str,
           cumulative: tuple[str, ...], replace: bool, fmt: str) -> None:
    """Load CSV exports (layout detected per file) into the warehouse.

    Every row is either loaded or kept in quarantine with its file, line and reason.

    \b
    Example:
      warehouse --home ./wh ingest exports/*.csv --source office-hosts
    """
    from warehouse.ingest.run import IngestOptions, ingest_files
    delimiter = delimiter.encode().decode("unicode_escape") if delimiter else None
    options = IngestOptions(source=source, layout=layout, delimiter=delimiter, decimal=decimal,
                            time_format=time_format, tz=tz, host=host, cumulative=cumulative, replace=replace)
    results = _with_progress(ctx, files, lambda progress: ingest_files(ctx.home, files, options, progress))
    _print_ingest(results, fmt)
    failed = [r for r in results if r.status == "failed"]
    for r in failed:
        click.echo(f"Error: {r.message}", err=True)
    if failed:
        sys.exit(1)


def _with_progress(ctx: Ctx, files: Sequence[Path], job: Callable[[Callable[[str, int], None] | None], Any]) -> Any:
    if ctx.quiet or not sys.stderr.isatty():
        return job(None)
    total = sum(p.stat().st_size for p in files if p.is_file()) or 1
    with click.progressbar(length=total, label="ingesting", file=sys.stderr) as bar:
        return job(lambda _path, size: bar.update(size))


INGEST_COLUMNS = ["path", "status", "layout", "rows_read", "rows_loaded", "rows_quarantined",
                  "cells_quarantined", "values_loaded", "counters", "ingest_id", "message"]


def _print_ingest(results: Sequence[Any], fmt: str) -> None:
    rows = [{c: getattr(r, c) for c in INGEST_COLUMNS} for r in results]
    if fmt == "json":
        click.echo(render_rows(rows, INGEST_COLUMNS, "json"))
        return
    for r in results:
        if r.status == "loaded":
            click.echo(f"loaded {r.path} [{r.layout}]: rows_read {r.rows_read} = loaded {r.rows_loaded}"
                       f" + quarantined {r.rows_quarantined}; {r.values_loaded} values, {r.counters} counters"
                       + (f", {r.cells_quarantined} bad cells quarantined" if r.cells_quarantined else "")
                       + (f", {r.wraps} wraps, {r.resets} resets" if r.wraps or r.resets else ""))
            for w in r.warnings:
                click.echo(f"  warning: {w}")
        elif r.status == "skipped":
            click.echo(f"skipped {r.message}")
    loaded = [r for r in results if r.status == "loaded"]
    click.echo(f"{len(loaded)} loaded, {sum(r.status == 'skipped' for r in results)} skipped,"
               f" {sum(r.status == 'failed' for r in results)} failed;"
               f" {sum(r.values_loaded for r in loaded)} values;"
               f" {sum(r.rows_quarantined for r in loaded)} rows quarantined")


@cli.command()
@click.argument("glob", required=False)
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@pass_ctx
@handle_errors
def counters(ctx: Ctx, glob: str | None, fmt: str) -> None:
    """List counters (all, or those whose key matches GLOB, case-insensitive).

    \b
    Example:
      warehouse --home ./wh counters '*disk*latency*'
    """
    with open_warehouse(ctx.home) as wh:
        rows = catalog.list_counters(wh, glob)
    click.echo(render_rows(rows, catalog.COUNTER_COLUMNS, fmt))


@cli.command()
@click.argument("query")
@click.option("--format", "fmt", type=click.Choice(["table", "csv", "json", "parquet"]), default="table", show_default=True)
@click.option("--out", type=click.Path(path_type=Path), help="Write the result to FILE instead of the screen.")
@click.option("--write", is_flag=True, help="Allow statements that change the warehouse.")
@pass_ctx
@handle_errors
def sql(ctx: Ctx, query: str, fmt: str, out: Path | None, write: bool) -> None:
    """Run SQL over counters, points, samples, quarantine, ingests (read-only unless --write).

    \b
    Example:
      warehouse --home ./wh sql "SELECT key, count(*), avg(value) FROM samples GROUP BY key ORDER BY 3 DESC LIMIT 10"
    """
    from warehouse.query import run_sql
    if fmt == "parquet" and out is None:
        raise click.UsageError("--format parquet needs --out FILE")
    with open_warehouse(ctx.home, read_only=not write) as wh:
        table = run_sql(wh, query)
    if fmt == "parquet":
        import pyarrow.parquet as pq
        pq.write_table(table, out)
        click.echo(f"wrote {table.num_rows} rows to {out}")
        return
    rows = table.to_pylist()
    text = render_rows(rows, table.column_names, fmt) if table.num_columns else "ok"
    if out:
        out.write_text(text + "\n", encoding="utf-8")
        click.echo(f"wrote {table.num_rows} rows to {out}")
    else:
        click.echo(text)


@cli.command()
@click.argument("selector")
@click.option("--from", "start", metavar="T", help="Start (date or date-time; local in the warehouse zone unless it has an offset).")
@click.option("--to", "end", metavar="T", help="End, exclusive.")
@click.option("--coverage", type=float, default=0.95, show_default=True, help="Share of samples the bound must cover.")
@click.option("--window", default="all", show_default=True, metavar="all|busiest-hours|HH:MM-HH:MM",
              help="Size on all buckets, each day's busiest hour(s), or a clock window (warehouse zone).")
@click.option("--busiest-hours", type=int, default=1, show_default=True, help="Hours per day picked by --window busiest-hours.")
@click.option("--days", metavar="mon-fri", help="Weekdays to keep, e.g. mon-fri or sat,sun.")
@click.option("--combine", type=click.Choice(["sum", "mean", "max"]), help="How several counters become one series (default sum for one counter on several hosts).")
@click.option("--bucket", default="1m", show_default=True, help="Time bucket (mean inside): 15s, 1m, 5m, 1h...")
@click.option("--capacity", type=float, help="Capacity of the platform in the counter's unit, to compare against.")
@click.option("--confidence", type=float, default=0.9, show_default=True, help="Confidence of the percentile's interval.")
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@click.option("--plot", "plot_file", type=click.Path(path_type=Path), metavar="FILE.png|FILE.svg",
              help="Also draw the result to a PNG or SVG file.")
@pass_ctx
@handle_errors
def size(ctx: Ctx, selector: str, start: str | None, end: str | None, coverage: float, window: str,
         busiest_hours: int, days: str | None, combine: str | None, bucket: str, capacity: float | None,
         confidence: float, fmt: str, plot_file: Path | None) -> None:
    """Size capacity for SELECTOR: a distribution-free bound (Cantelli) beside peak, mean and percentiles.

    \b
    Example:
      warehouse --home ./wh size 'san01/pool=*/read_iops' --window busiest-hours --days mon-fri
      warehouse --home ./wh size 'san01/pool=*/*_iops' --combine sum --window busiest-hours --plot size.png
    """
    from warehouse.engine import size as size_on
    from warehouse.render import render_sizing
    from warehouse.sizing import SizeRequest
    req = SizeRequest(selector, start, end, coverage, window, days, combine, bucket, capacity, confidence, busiest_hours)
    _check_plot(plot_file)
    with open_warehouse(ctx.home) as wh:
        result = size_on(wh, req, ctx.engine())
        if plot_file:
            _plot("plot_size", wh, req, result, plot_file)
    if fmt == "table":
        click.echo(render_sizing(result))
    elif fmt == "csv":
        flat = dict(result, cautions=" | ".join(result["cautions"]))
        click.echo(render_rows([flat], list(flat), "csv"))
    else:
        click.echo(render_mapping(result, "json"))


@cli.command()
@click.argument("target", required=False)
@click.option("--against", metavar="GLOB", help="Counters to rank (default: every other counter).")
@click.option("--from", "start", metavar="T", help="Start (local in the warehouse zone unless it has an offset).")
@click.option("--to", "end", metavar="T", help="End, exclusive.")
@click.option("--bucket", default="1m", show_default=True, help="Time bucket (mean inside): 15s, 1m, 5m...")
@click.option("--method", type=click.Choice(["spearman", "pearson"]), default="spearman", show_default=True)
@click.option("--max-lag", type=int, default=0, show_default=True, help="Also try each counter shifted by -N..+N buckets.")
@click.option("--top", type=int, default=None, help="How many to show (default 25, or 50 pairs).")
@click.option("--fdr", type=float, default=0.05, show_default=True, help="False discovery rate for the q-value mark.")
@click.option("--min-overlap", type=int, default=30, show_default=True, help="Fewest shared buckets for a test.")
@click.option("--pairs", is_flag=True, help="Strongest pairs among the --against counters instead of a target.")
@click.option("--rhythm", type=click.Choice(["keep", "remove"]), default="keep", show_default=True,
              help="remove: subtract each series' hour-of-week median first, so the shared office rhythm does not"
                   " dominate (it also removes anything scheduled weekly at the same hour).")
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@click.option("--plot", "plot_file", type=click.Path(path_type=Path), metavar="FILE.png|FILE.svg",
              help="Also draw the result to a PNG or SVG file.")
@pass_ctx
@handle_errors
def correlate(ctx: Ctx, target: str | None, against: str | None, start: str | None, end: str | None, bucket: str,
              method: str, max_lag: int, top: int | None, fdr: float, min_overlap: int, pairs: bool, rhythm: str,
              fmt: str, plot_file: Path | None) -> None:
    """Rank counters by how they move with TARGET (or the strongest --pairs), with lead/lag and FDR control.

    lag +k means the counter moves k buckets BEFORE the target (it leads).

    \b
    Example:
      warehouse --home ./wh correlate 'vdi-hv02/Processor/_Total/*' --max-lag 5 --top 10
    """
    from warehouse.correlate import CorrelateRequest
    from warehouse.engine import correlate as correlate_on
    from warehouse.render import render_correlations, render_pairs
    if bool(target) == pairs:
        raise click.UsageError("give a TARGET, or --pairs without one")
    if pairs and plot_file:
        raise click.UsageError("--plot draws a target's suspects; it does not go with --pairs")
    _check_plot(plot_file)
    req = CorrelateRequest(target, against, start, end, bucket, method, max_lag, top or (50 if pairs else 25),
                           fdr, min_overlap, pairs, rhythm)
    with open_warehouse(ctx.home) as wh:
        result = correlate_on(wh, req, ctx.engine())
        if plot_file:
            _plot("plot_correlate", wh, req, result, plot_file)
    rows = result["pairs" if pairs else "results"]
    if fmt == "json":
        click.echo(render_mapping(result, "json"))
    elif fmt == "csv":
        click.echo(render_rows(rows, list(rows[0]) if rows else ["key"], "csv"))
    else:
        click.echo(render_pairs(result) if pairs else render_correlations(result))


@cli.command()
@click.argument("selector")
@click.option("--from", "start", metavar="T", help="Start (local in the warehouse zone unless it has an offset).")
@click.option("--to", "end", metavar="T", help="End, exclusive.")
@click.option("--bucket", default="1m", show_default=True, help="Time bucket (mean inside).")
@click.option("--min-period", default="2m", show_default=True, help="Shortest period to look for.")
@click.option("--max-period", default="8d", show_default=True, help="Longest period to look for (at most half the range).")
@click.option("--above", default="p95", show_default=True, metavar="VALUE|pNN|bound", help="Episode threshold.")
@click.option("--gap", default="5m", show_default=True, help="Episodes closer than this are merged.")
@click.option("--combine", type=click.Choice(["sum", "mean", "max"]), help="How several counters become one series.")
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@click.option("--plot", "plot_file", type=click.Path(path_type=Path), metavar="FILE.png|FILE.svg",
              help="Also draw the result to a PNG or SVG file.")
@pass_ctx
@handle_errors
def patterns(ctx: Ctx, selector: str, start: str | None, end: str | None, bucket: str, min_period: str,
             max_period: str, above: str, gap: str, combine: str | None, fmt: str, plot_file: Path | None) -> None:
    """Find periodic peaks, episodes above a threshold, the weekday x hour profile and level shifts.

    \b
    Example:
      warehouse --home ./wh patterns 'san01/pool=vdi/write_latency_ms' --max-period 2h --above p99
    """
    from warehouse.patterns import PatternRequest, find_patterns
    from warehouse.render import render_patterns
    req = PatternRequest(selector, start, end, bucket, min_period, max_period, above, gap, combine)
    _check_plot(plot_file)
    with open_warehouse(ctx.home) as wh:
        result = find_patterns(wh, req)
        if plot_file:
            _plot("plot_patterns", wh, req, result, plot_file)
    if fmt == "json":
        click.echo(render_mapping(result, "json"))
    elif fmt == "csv":
        click.echo(render_rows(result["periods"], ["seconds", "label", "strength", "p"], "csv"))
    else:
        click.echo(render_patterns(result))


@cli.command()
@click.option("--period", "periods", type=click.Choice(["week", "day", "month"]), multiple=True,
              help="Which summaries to compute (repeatable; default week).")
@click.option("--due", "mode", flag_value="due", help="Only periods touched by ingests since the last rollup (default).")
@click.option("--all", "mode", flag_value="all", help="Rebuild every period.")
@click.option("--since", metavar="DATE", help="Rebuild every period from the one holding DATE (local) on.")
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True)
@pass_ctx
@handle_errors
def rollup(ctx: Ctx, periods: tuple[str, ...], mode: str | None, since: str | None, fmt: str) -> None:
    """Summarise every counter per local day, ISO week or month into rollup_day/_week/_month.

    Safe to run at any time (one rollup at a time; a killed run leaves the previous rows);
    prints one summary line.

    \b
    Example:
      warehouse --home ./wh rollup --due --period week --period month
    """
    from warehouse.engine import rollup as run_rollup
    from warehouse.render import render_rollup
    from warehouse.rollup import RollupRequest
    if since is not None and mode is not None:
        raise click.UsageError("--since cannot go with --due or --all")
    req = RollupRequest(periods or ("week",), "since" if since is not None else (mode or "due"), since)
    summaries = run_rollup(ctx.home, req, ctx.engine())
    click.echo(render_mapping({"rollups": summaries}, "json") if fmt == "json" else render_rollup(summaries))


@cli.command()
@click.argument("selector")
@click.option("--stat", type=click.Choice(["p95", "bound", "mean", "max", "p50", "p99"]), default="p95",
              show_default=True, help="Weekly statistic to follow (bound: the sizing bound stored by the rollup).")
@click.option("--capacity", type=float, help="Level to reach, in the counter's unit: report the week the line crosses it.")
@click.option("--combine", type=click.Choice(["sum", "mean", "max"]),
              help="Follow the selected counters as one series (1-minute means combined; computed from the points).")
@click.option("--confidence", type=float, default=0.9, show_default=True, help="Confidence of the growth interval.")
@click.option("--horizon", "horizon_weeks", type=int, default=52, show_default=True,
              help="Weeks after the last one to look for the crossing.")
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True)
@click.option("--plot", "plot_file", type=click.Path(path_type=Path), metavar="FILE.png|FILE.svg",
              help="Also draw the result to a PNG or SVG file.")
@pass_ctx
@handle_errors
def trend(ctx: Ctx, selector: str, stat: str, capacity: float | None, combine: str | None, confidence: float,
          horizon_weeks: int, fmt: str, plot_file: Path | None) -> None:
    """Weekly series of a statistic, its growth per week (Theil-Sen) and when it reaches --capacity.

    \b
    Example:
      warehouse --home ./wh trend 'san01/pool=vdi/read_iops' --stat p95 --capacity 12000
    """
    from warehouse.render import render_trend
    from warehouse.trend import TrendRequest, trend as weekly_trend
    req = TrendRequest(selector, stat, capacity, combine, confidence, horizon_weeks)
    _check_plot(plot_file)
    with open_warehouse(ctx.home) as wh:
        result = weekly_trend(wh, req)
    if plot_file:
        _plot("plot_trend", result, plot_file)
    click.echo(render_mapping(result, "json") if fmt == "json" else render_trend(result))


@cli.command()
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@pass_ctx
@handle_errors
def status(ctx: Ctx, fmt: str) -> None:
    """Sources, counters, files, points, time range, bytes on disk, quarantined rows.

    \b
    Example:
      warehouse --home ./wh status --format json
    """
    with open_warehouse(ctx.home) as wh:
        click.echo(render_mapping(catalog.status(wh), fmt))


@cli.command()
@click.option("--fix", is_flag=True, help="Delete orphan files and stale staging folders (never listed files).")
@click.option("--deep", is_flag=True, help="Also re-read every file: row counts and checksums recorded at ingest.")
@click.option("--repair", is_flag=True, help="With --deep: set damaged or missing files aside (damaged/) and drop"
              " them from the catalog, so queries keep working; says what was lost.")
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True)
@pass_ctx
@handle_errors
def check(ctx: Ctx, fix: bool, deep: bool, repair: bool, fmt: str) -> None:
    """Check that the catalog and the files on disk agree; list orphans (--deep: damaged files).

    \b
    Example:
      warehouse --home ./wh check --fix
      warehouse --home ./wh check --deep --repair
    """
    with open_warehouse(ctx.home, views=False) as wh:
        report = catalog.check(wh, fix=fix, deep=deep, repair=repair)
    if fmt == "json":
        click.echo(render_mapping(report, "json"))
    else:
        click.echo(render_check(report))
    leftover = (report["orphans"] or report["stale_staging"]) and not fix
    if report["missing"] or (report.get("damaged") and not repair) or leftover:
        sys.exit(1)


@cli.command()
@click.option("--scale", type=click.Choice(["small", "large"]), default="small", show_default=True)
@click.option("--keep-csv", type=click.Path(path_type=Path), help="Also keep the generated CSV files in this folder.")
@click.option("--report", "report_file", type=click.Path(path_type=Path), metavar="FILE.html",
              help="Where to write the story's report (default: report.html in --home).")
@pass_ctx
@handle_errors
def demo(ctx: Ctx, scale: str, keep_csv: Path | None, report_file: Path | None) -> None:
    """Generate the invented demo scenario, load it into --home, run the whole story and write its report.

    \b
    Example:
      warehouse --home ./demo-wh demo --scale small --report demo-report.html
    """
    from warehouse.demo import run_demo
    for line in run_demo(ctx.home, scale=scale, keep_csv=keep_csv, quiet=ctx.quiet, report=report_file):
        click.echo(line)


@cli.command()
@click.argument("selector")
@click.option("--before", required=True, metavar="PERIOD", help="T1..T2, an ISO week (2026-W11), a day or a month.")
@click.option("--after", required=True, metavar="PERIOD", help="The period to compare with it; must not overlap.")
@click.option("--window", default="all", show_default=True, metavar="all|busiest-hours|HH:MM-HH:MM",
              help="Compare all buckets, each day's busiest hour(s), or a clock window (warehouse zone).")
@click.option("--busiest-hours", type=int, default=1, show_default=True, help="Hours per day picked by --window busiest-hours.")
@click.option("--days", metavar="mon-fri", help="Weekdays to keep, e.g. mon-fri.")
@click.option("--combine", type=click.Choice(["sum", "mean", "max"]), help="How several counters become one series.")
@click.option("--bucket", default="1m", show_default=True, help="Time bucket (mean inside).")
@click.option("--confidence", type=float, default=0.95, show_default=True, help="Confidence of the intervals.")
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@click.option("--plot", "plot_file", type=click.Path(path_type=Path), metavar="FILE.png|FILE.svg",
              help="Also draw the result to a PNG or SVG file.")
@pass_ctx
@handle_errors
def compare(ctx: Ctx, selector: str, before: str, after: str, window: str, busiest_hours: int, days: str | None,
            combine: str | None, bucket: str, confidence: float, fmt: str, plot_file: Path | None) -> None:
    """Did a change (upgrade, migration, patch) move SELECTOR? Distribution-free before/after test.

    \b
    Example:
      warehouse --home ./wh compare 'san01/pool=vdi/read_iops' --before 2026-W11 --after 2026-W12
    """
    from warehouse.compare import CompareRequest, compare_periods
    from warehouse.render import render_compare
    req = CompareRequest(selector, before, after, window, days, busiest_hours, combine, bucket, confidence)
    _check_plot(plot_file)
    with open_warehouse(ctx.home) as wh:
        result = compare_periods(wh, req)
        if plot_file:
            _plot("plot_compare", wh, req, result, plot_file)
    if fmt == "json":
        click.echo(render_mapping(result, "json"))
    elif fmt == "csv":
        flat = {k: v for k, v in result.items() if k not in ("before", "after", "cautions")}
        flat.update({f"{side}_{k}": v for side in ("before", "after") for k, v in result[side].items()})
        click.echo(render_rows([dict(flat, cautions=" | ".join(result["cautions"]))], [*flat, "cautions"], "csv"))
    else:
        click.echo(render_compare(result))


@cli.command()
@click.argument("selector", required=False)
@click.option("--period", metavar="PERIOD", help="2026-W14 (ISO week), 2026-03-16 (a day), 2026-03 (a month) or T1..T2.")
@click.option("--from", "start", metavar="T", help="Start of the period, instead of --period.")
@click.option("--to", "end", metavar="T", help="End of the period, exclusive.")
@click.option("--history", type=int, default=8, show_default=True, help="How many comparable periods before it to compare with.")
@click.option("--top", type=int, default=30, show_default=True, help="How many counters to list.")
@click.option("--fdr", type=float, default=0.05, show_default=True, help="False discovery rate for the q-value count.")
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@click.option("--plot", "plot_file", type=click.Path(path_type=Path), metavar="FILE.png|FILE.svg",
              help="Also draw the result to a PNG or SVG file.")
@pass_ctx
@handle_errors
def changes(ctx: Ctx, selector: str | None, period: str | None, start: str | None, end: str | None, history: int,
            top: int, fdr: float, fmt: str, plot_file: Path | None) -> None:
    """Rank every counter (or those matching SELECTOR) by how far a period departs from its own history.

    \b
    Example:
      warehouse --home ./wh changes --period 2026-W12 --history 8 --top 20
    """
    from warehouse.changes import ROW_KEYS, ChangesRequest, find_changes
    from warehouse.render import render_changes
    _check_plot(plot_file)
    req = ChangesRequest(period, start, end, history, top, selector, fdr)
    with open_warehouse(ctx.home) as wh:
        result = find_changes(wh, req)
        if plot_file:
            _plot("plot_changes", wh, req, result, plot_file)
    if fmt == "json":
        click.echo(render_mapping(result, "json"))
    elif fmt == "csv":
        click.echo(render_rows(result["results"], list(ROW_KEYS), "csv"))
    else:
        click.echo(render_changes(result))


@cli.command()
@click.argument("selector", required=False)
@click.option("--period", metavar="PERIOD", help="2026-W14, 2026-03-16, 2026-03 or T1..T2 (default: everything).")
@click.option("--top", type=int, default=50, show_default=True, help="How many counters to list (most time beyond first).")
@click.option("--file", "limits_file", type=click.Path(path_type=Path), metavar="FILE",
              help="Read levels from FILE instead of <home>/limits.toml (the defaults still follow unless it drops them).")
@click.option("--format", "fmt", type=FORMATS, default="table", show_default=True)
@pass_ctx
@handle_errors
def limits(ctx: Ctx, selector: str | None, period: str | None, top: int, limits_file: Path | None, fmt: str) -> None:
    """Time, share and longest stretch of each counter beyond its warn and critical levels (limits.toml).

    \b
    Example:
      warehouse --home ./wh limits --period 2026-W12
    """
    from warehouse.limits import ROW_KEYS, check_limits
    from warehouse.render import render_limits
    with open_warehouse(ctx.home) as wh:
        result = check_limits(wh, period, selector, top, limits_file)
    if fmt == "json":
        click.echo(render_mapping(result, "json"))
    elif fmt == "csv":
        click.echo(render_rows(result["results"], list(ROW_KEYS), "csv"))
    else:
        click.echo(render_limits(result))


@cli.command()
@click.argument("selectors", nargs=-1)
@click.option("--out", type=click.Path(path_type=Path), default=Path("report.html"), show_default=True,
              help="The HTML file to write (self-contained: images inline).")
@click.option("--pdf", type=click.Path(path_type=Path), metavar="FILE.pdf", help="Also write the figures and readings as a PDF.")
@click.option("--title", default="Capacity and troubleshooting report", show_default=True)
@click.option("--from", "start", metavar="T", help="Start of the range for sizing, patterns and suspects.")
@click.option("--to", "end", metavar="T", help="End, exclusive.")
@click.option("--window", default="all", show_default=True, metavar="all|busiest-hours|HH:MM-HH:MM", help="Sizing window.")
@click.option("--busiest-hours", type=int, default=1, show_default=True, help="Hours per day picked by --window busiest-hours.")
@click.option("--days", metavar="mon-fri", help="Weekdays to size on, e.g. mon-fri.")
@click.option("--combine", type=click.Choice(["sum", "mean", "max"]), help="How several counters become one series.")
@click.option("--bucket", default="1m", show_default=True, help="Time bucket (mean inside).")
@click.option("--capacity", type=float, help="Capacity in the counters' unit, for sizing and trend.")
@click.option("--suspects", multiple=True, metavar="TARGET", help="Rank suspects for TARGET (repeatable).")
@click.option("--max-lag", type=int, default=0, show_default=True, help="Lags tried for --suspects, in buckets.")
@click.option("--patterns", "pattern_selectors", multiple=True, metavar="SELECTOR",
              help="Patterns of SELECTOR alone (repeatable; each SELECTORS argument gets one anyway).")
@click.option("--max-period", default="8d", show_default=True, help="Longest period the patterns look for.")
@click.option("--trend", "trend_selectors", multiple=True, metavar="SELECTOR", help="Weekly trend of SELECTOR (repeatable).")
@click.option("--stat", type=click.Choice(["p95", "bound", "mean", "max", "p50", "p99"]), default="p95", show_default=True,
              help="Weekly statistic for --trend.")
@click.option("--before", metavar="PERIOD", help="With --after: compare each SELECTORS argument between two periods.")
@click.option("--after", metavar="PERIOD")
@click.option("--changes", "changes_period", metavar="PERIOD", help="Add what changed in PERIOD against its history.")
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True)
@pass_ctx
@handle_errors
def report(ctx: Ctx, selectors: tuple[str, ...], out: Path, pdf: Path | None, fmt: str, **options: Any) -> None:
    """Write one self-contained HTML report: sizing and patterns of each SELECTOR, plus the analyses asked for.

    Every section holds its figure, the key numbers, a plain-language reading, the method and
    its assumptions, and its cautions.

    \b
    Example:
      warehouse --home ./wh report 'san01/pool=*/*_iops' --combine sum --window busiest-hours --days mon-fri \\
          --suspects 'san01/pool=vdi/read_latency_ms' --max-lag 5 --trend 'san01/pool=vdi/read_iops' --out report.html
    """
    from warehouse.report import ReportPlan, write_report
    plan = ReportPlan(selectors=selectors, **options)
    with open_warehouse(ctx.home) as wh:
        written = write_report(wh, plan.request(), out, pdf)
    if fmt == "json":
        click.echo(render_mapping(written, "json"))
        return
    click.echo(f"report written to {written['out']} ({written['bytes']:,} bytes, {len(written['sections'])} sections,"
               f" {written['seconds']:.1f} s)" + (f"; PDF {written['pdf']}" if written["pdf"] else ""))
    from textwrap import fill
    for s in written["sections"]:
        click.echo(fill(s["reading"], 100, initial_indent="  - ", subsequent_indent="    "))


def _check_plot(plot_file: Path | None) -> None:
    """Refuse a bad plot file name before the analysis runs."""
    if plot_file is not None:
        from warehouse.plot import check_path
        check_path(plot_file)


def _plot(name: str, *args: Any) -> None:
    """Draw with warehouse.plot.<name> (matplotlib is imported only now) and say where it went."""
    from warehouse import plot
    path = getattr(plot, name)(*args)
    click.echo(f"plot written to {path}", err=True)


def main() -> None:
    cli(prog_name="warehouse")
