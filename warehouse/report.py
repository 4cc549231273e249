"""`warehouse report`: one self-contained HTML file to hand over.

Each analysis (sizing, suspects, patterns, trend, before/after, what changed) becomes a section
with its figure inlined as a base64 PNG, the key numbers, a plain-language reading, the method and
its assumptions in one paragraph, and its cautions. Text goes through html.escape; nothing is
fetched when the file is opened. `--pdf` writes the same figures and readings with matplotlib's
own PDF backend (no system packages).
"""
from __future__ import annotations

import base64
import html
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from warehouse import catalog, plot, plotdata
from warehouse.changes import ChangesRequest, find_changes
from warehouse.compare import CompareRequest, compare_periods
from warehouse.correlate import CorrelateRequest, correlate_target
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.patterns import PatternRequest, find_patterns
from warehouse.render import _growth, _week_words
from warehouse.sizing import SizeRequest, size_selector
from warehouse.timeutil import format_duration
from warehouse.trend import TrendRequest, trend

BEFORE_YOU_ACT = (
    "A sizing bound describes the observed period only: repeat the analysis on other periods (other weeks,"
    " month ends, seasonal peaks) before buying.",
    "Correlation points where to look; it is not a cause. Confirm a suspect on other periods and with the"
    " team that owns it before acting.",
    "Not finding a pattern does not prove there is none: a period longer than a third of the range, shorter"
    " than two buckets, or weaker than the noise can hide.",
    "A trend line extrapolates the weeks behind it; projects, migrations and seasons break it.",
    "Vendor limits and local practice decide the final design: these figures are evidence for it, not the design.",
)
METHODS = {
    "size": (
        "The selected counters are averaged into time buckets and combined (summed across hosts by default);"
        " only the buckets of the chosen window and days are used. The bound is mean + k·sd with k = √(p/(1−p)),"
        " which by Cantelli's one-sided inequality covers at least p of the samples whatever their distribution;"
        " the empirical percentiles and a moving-block bootstrap interval stand beside it. Assumes the observed"
        " period is representative of the one being sized for."),
    "correlate": (
        "The target and every other counter are averaged into the same buckets; Spearman's rank correlation"
        " (or Pearson's) is taken at each lag, the strongest lag kept. p-values use an effective sample size"
        " from the lag-1 autocorrelations of both series (Bretherton et al.), and Benjamini–Hochberg q-values"
        " control the false discovery rate over every test made. Assumes the relation is monotonic and steady"
        " over the range; shared rhythms (office hours) correlate everything a little."),
    "patterns": (
        "Periods: the detrended series' periodogram is tested against a red-noise background (Fisher's g with"
        " a known scale, p < 0.01) and each finding is confirmed by the autocorrelation at its lag. Episodes are"
        " runs above the threshold; their starts are tested for clustering by hour and weekday (chi-square)."
        " Level shifts: binary segmentation of hourly means with the calendar rhythm taken out, with a penalty"
        " that allows for autocorrelated noise. Assumes the bucket is shorter than half the shortest period."),
    "trend": (
        "One value per ISO week (the statistic from the weekly rollup, or from the points for a combined"
        " series); the growth per week is the Theil–Sen slope (median of pairwise slopes) with Sen's"
        " distribution-free interval, and the crossing is where the line through the median point reaches the"
        " capacity. Open and thin weeks are not fitted. Assumes the growth of these weeks continues unchanged."),
    "compare": (
        "The two periods' bucket values (same window and days) are compared without assuming a distribution:"
        " Mann–Whitney's test with effective sample sizes from the ranks' autocorrelation, the Hodges–Lehmann"
        " shift with its rank-based interval, Kolmogorov–Smirnov for the shape, and bootstrap intervals of the"
        " percentiles. Assumes nothing else that matters differed between the periods."),
    "changes": (
        "Every counter's mean in the period is scored against the means of the same counter in the comparable"
        " periods before it: (mean − median of the history) / (1.4826 × MAD), never below the standard error of"
        " a usual period's mean; p-values from Student's t as a prediction interval, Benjamini–Hochberg"
        " q-values over all counters. Assumes the history periods are alike (same load, no gaps)."),
}
TITLES = {"size": "Sizing", "correlate": "Suspects", "patterns": "Patterns", "trend": "Trend",
          "compare": "Before and after", "changes": "What changed"}


@dataclass(frozen=True)
class ReportRequest:
    """The analyses to run, in order: SizeRequest, CorrelateRequest, PatternRequest, TrendRequest,
    CompareRequest or ChangesRequest objects, each as its own command takes it."""

    analyses: tuple[Any, ...]
    title: str = "Capacity and troubleshooting report"
    dpi: int = 110


@dataclass(frozen=True)
class ReportPlan:
    """The `warehouse report` options: each selector is sized and searched for patterns (and
    compared, with before and after); suspects, extra patterns, trends and changes are added."""

    selectors: tuple[str, ...] = ()
    title: str = "Capacity and troubleshooting report"
    start: str | None = None
    end: str | None = None
    window: str = "all"
    busiest_hours: int = 1
    days: str | None = None
    combine: str | None = None
    bucket: str = "1m"
    capacity: float | None = None
    suspects: tuple[str, ...] = ()
    max_lag: int = 0
    pattern_selectors: tuple[str, ...] = ()
    max_period: str = "8d"
    trend_selectors: tuple[str, ...] = ()
    stat: str = "p95"
    before: str | None = None
    after: str | None = None
    changes_period: str | None = None

    def request(self) -> ReportRequest:
        if bool(self.before) != bool(self.after):
            raise WarehouseError("give --before and --after together")
        out: list[Any] = []
        for sel in self.selectors:
            out.append(SizeRequest(sel, self.start, self.end, window=self.window, days=self.days, combine=self.combine,
                                   bucket=self.bucket, capacity=self.capacity, busiest_hours=self.busiest_hours))
        out += [CorrelateRequest(t, start=self.start, end=self.end, bucket=self.bucket, max_lag=self.max_lag)
                for t in self.suspects]
        out += [PatternRequest(sel, self.start, self.end, self.bucket, max_period=self.max_period, combine=self.combine)
                for sel in (*self.selectors, *self.pattern_selectors)]
        # --combine is meant for selectors naming several counters; one counter's trend reads its rollups.
        out += [TrendRequest(sel, self.stat, self.capacity, self.combine if any(c in sel for c in "*?[") else None)
                for sel in self.trend_selectors]
        if self.before and self.after:
            out += [CompareRequest(sel, self.before, self.after, self.window, self.days, self.busiest_hours,
                                   self.combine, self.bucket) for sel in self.selectors]
        if self.changes_period:
            out.append(ChangesRequest(period=self.changes_period))
        return ReportRequest(tuple(out), self.title)


@dataclass
class Section:
    kind: str
    heading: str
    result: dict[str, Any]
    reading: list[str]
    numbers: list[tuple[str, ...]]
    cautions: list[str]
    image: bytes
    figure: Any = field(default=None, repr=False)


@dataclass
class Report:
    title: str
    facts: dict[str, Any]
    sections: list[Section]
    html: str = ""


# -- numbers in words --------------------------------------------------------------------------------------

def _num(value: float | None, unit: str = "") -> str:
    if value is None or not np.isfinite(value):
        return "-"
    text = f"{value:,.4g}" if abs(value) < 1000 else f"{value:,.0f}"
    return f"{text} {unit}".rstrip()


def _unit_words(unit: str) -> str:
    return unit or ""


def _when(value: Any) -> str:
    return pd.Timestamp(value).strftime("%a %d %b %Y %H:%M")


# -- one section per analysis --------------------------------------------------------------------------------

def _size(wh: Warehouse, req: SizeRequest) -> Section:
    r = size_selector(wh, req)
    series = plotdata.size_series(wh, req)
    fig = plot.size_figure(r, series)
    u = _unit_words(r["unit"])
    what = {"all": "", "busiest-hours": "busiest-hour "}.get(r["window"], f"{r['window']} ")
    p = r["coverage_target"]
    reading = [f"At least {p:.0%} of the {what}samples were at or below {_num(r['bound'], u)}"
               f" (the Cantelli bound; {r['coverage_observed']:.1%} actually were); the peak was {_num(r['max'], u)}"
               f" and the empirical p95 {_num(r['p95'], u)}."]
    short, days = _short_days(series, r["mean"])
    if days:
        span = "busiest hours" if r["window"] == "busiest-hours" else "days"
        how_many = f"every one of the {days}" if short == days else f"{short} of the {days}"
        reading.append(f"Sizing for the mean ({_num(r['mean'], u)}) would have left {how_many} {span}"
                       " short: their highest bucket was above it.")
    if r["capacity"] is not None:
        reading.append(f"Against a capacity of {_num(r['capacity'], u)}: {r['above_capacity_fraction']:.1%} of the"
                       f" samples were above it; headroom over the bound {r['headroom']:.1%}.")
    numbers = [("figure", "value", "what it says"),
               ("peak", _num(r["max"], u), "highest bucket observed"),
               ("p99", _num(r["p99"], u), "99% of buckets at or below"),
               ("p95", _num(r["p95"], u), "95% of buckets at or below"),
               (f"p{p * 100:g} [{r['confidence']:.0%} interval]",
                f"{_num(r['quantile_at_target'], u)} [{_num(r['quantile_ci_low'])}, {_num(r['quantile_ci_high'])}]",
                "moving-block bootstrap"),
               (f"bound (Cantelli {p:.0%})", _num(r["bound"], u), f"mean + {r['k']:.3g} sd; any distribution"),
               ("mean", _num(r["mean"], u), "sizing to it leaves the busy part short"),
               ("samples", f"{r['n']:,} (about {r['n_effective']:,.0f} independent)", "")]
    heading = f"Sizing: {r['selector']}"
    return Section("size", heading, r, reading, numbers, r["cautions"], b"", fig)


def _short_days(series: plotdata.Series, level: float) -> tuple[int, int]:
    """How many local days' sized buckets peaked above `level`, of the days with any."""
    if not series.mask.any():
        return 0, 0
    local = pd.DatetimeIndex(pd.to_datetime(series.times[series.mask], unit="us", utc=True)).tz_convert(series.zone)
    peaks = pd.Series(series.values[series.mask]).groupby(np.asarray(local.date)).max()
    return int((peaks > level).sum()), int(len(peaks))


def _correlate(wh: Warehouse, req: CorrelateRequest) -> Section:
    r = correlate_target(wh, req)
    fig = plot.correlate_figure(r, plotdata.correlate_overlay(wh, req, r))
    rows = r["results"]
    reading = []
    if rows:
        first = rows[0]
        reading.append(f"The first suspect for {r['target']} is {first['key']}: {r['method']} r = {first['r']:+.2f},"
                       f" {plot.lag_words(first['lag'], r['bucket_seconds'])}"
                       f" ({'passes' if first['q'] < r['fdr'] else 'does not pass'} q < {r['fdr']}).")
    reading.append(f"{r['passing']} of {r['counters_tested']} counters pass q < {r['fdr']} over {r['tested']} tests"
                   f" ({r['skipped']} skipped as constant or too short).")
    if r["passing"] == 0:
        reading.append("Nothing stands out beyond chance in this range.")
    numbers = [("counter", "r", "lag", "n", "about independent", "q")]
    numbers += [(row["key"], f"{row['r']:+.3f}", plot.lag_words(row["lag"], r["bucket_seconds"]), f"{row['n']:,}",
                 f"{row['n_effective']:,.0f}", f"{row['q']:.2g}") for row in rows[:10]]
    cautions = r["cautions"] + [r["lag_convention"]]
    return Section("correlate", f"Suspects: {r['target']}", r, reading, numbers, cautions, b"", fig)


def _patterns(wh: Warehouse, req: PatternRequest) -> Section:
    r = find_patterns(wh, req)
    series = plotdata.patterns_series(wh, req)
    fig = plot.patterns_figure(r, series, plotdata.spectrum(series.values, r["bucket_seconds"]))
    u = _unit_words(r["unit"])
    reading = []
    if r["periods"]:
        reading.append(f"{r['selector']} repeats " + "; and ".join(
            f"every {p['label']} ({p['strength']:.0%} of its variance, p = {p['p']:.2g})" for p in r["periods"]) + ".")
    else:
        reading.append(f"No periodic component of {r['selector']} passed the test at p < 0.01.")
    for c in r["change_points"]:
        pct = (c["after_mean"] / c["before_mean"] - 1) * 100 if c["before_mean"] else float("nan")
        reading.append(f"The level shifted around {_when(c['ts'])}: mean {_num(c['before_mean'], u)} before,"
                       f" {_num(c['after_mean'], u)} after ({pct:+.0f}%).")
    ec = r["episode_clustering"]
    if r["episodes"]:
        where = ""
        if ec.get("clustered"):
            day = ec["weekday_names"][int(np.argmax(ec["by_weekday"]))]
            hour = int(np.argmax(ec["by_hour"]))
            where = f"; their starts cluster (most on {day}, most at {hour:02d}:00)"
        reading.append(f"{len(r['episodes'])} episode(s) above {_num(r['threshold'], u)} ({r['threshold_kind']}){where}.")
    numbers = [("finding", "when / how often", "detail")]
    numbers += [("period", f"every {p['label']}", f"strength {p['strength']:.0%}, p = {p['p']:.2g}, acf {p['acf']:+.2f}")
                for p in r["periods"]]
    numbers += [("level shift", _when(c["ts"]), f"{_num(c['before_mean'], u)} → {_num(c['after_mean'], u)}")
                for c in r["change_points"]]
    longest = sorted(r["episodes"], key=lambda e: -e["seconds"])[:5]
    numbers += [("episode", _when(e["start"]), f"{format_duration(e['seconds'])}, peak {_num(e['peak'], u)}")
                for e in longest]
    return Section("patterns", f"Patterns: {r['selector']}", r, reading, numbers, r["cautions"], b"", fig)


def _trend(wh: Warehouse, req: TrendRequest) -> Section:
    r = trend(wh, req)
    fig = plot.trend_figure(r, plotdata.trend_lines(r))
    reading = []
    for s in r["series"][:3]:
        fit = s["fit"]
        if fit is None:
            reading.append(f"{s['key']}: too few complete weeks for a line.")
            continue
        text = f"Weekly {r['stat']} of {s['key']} changes by {_growth(fit, s['unit'])} ({r['confidence']:.0%} interval)"
        if r["capacity"] is not None:
            text += f"; reaching {_num(r['capacity'], s['unit'])}: {_week_words(fit['crossing'], r['horizon_weeks'])}"
        reading.append(text + ".")
    numbers = [("series", "weeks fitted", "growth per week [interval]", "reaches capacity")]
    for s in r["series"][:10]:
        fit = s["fit"]
        numbers.append((s["key"], str(fit["weeks_used"]) if fit else "-", _growth(fit, s["unit"]),
                        _week_words(fit["crossing"], r["horizon_weeks"]) if fit and r["capacity"] is not None else "-"))
    return Section("trend", f"Trend: {r['selector']}", r, reading, numbers, r["cautions"], b"", fig)


def _compare(wh: Warehouse, req: CompareRequest) -> Section:
    r = compare_periods(wh, req)
    before, after = plotdata.compare_samples(wh, req)
    fig = plot.compare_figure(r, before, after)
    u = _unit_words(r["unit"])
    numbers = [("period", "samples", "about independent", "mean", "p50", "p95", "p99")]
    for side in ("before", "after"):
        s = r[side]
        numbers.append((s["period"], f"{s['n']:,}", f"{s['n_effective']:,.0f}", _num(s["mean"], u), _num(s["p50"], u),
                        _num(s["p95"], u), _num(s["p99"], u)))
    return Section("compare", f"Before and after: {r['selector']}", r, [r["verdict"] + "."], numbers,
                   r["cautions"], b"", fig)


def _changes(wh: Warehouse, req: ChangesRequest) -> Section:
    r = find_changes(wh, req)
    fig = plot.changes_figure(r, plotdata.changes_history(wh, req, r, 12))
    moved = ", ".join(f"{row['key']} ({row['change_pct']:+.0f}%)" if row["change_pct"] is not None else row["key"]
                      for row in r["results"][:3])
    reading = [f"{r['passing']} of {r['counters_scored']} counters departed from their own history at q < {r['fdr']}"
               f" in {r['period']}; the largest moves: {moved or 'none'}."]
    if r["new"] or r["silent"]:
        reading.append(f"{len(r['new'])} counter(s) are new and {len(r['silent'])} went silent.")
    numbers = [("counter", "score", "change", "mean", "usual mean", "q")]
    numbers += [(row["key"], f"{row['score']:+.1f}", f"{row['change_pct']:+.0f}%" if row["change_pct"] is not None else "-",
                 _num(row["mean"], row["unit"] or ""), _num(row["history_mean"], row["unit"] or ""), f"{row['q']:.2g}")
                for row in r["results"][:15]]
    return Section("changes", f"What changed: {r['period']}", r, reading, numbers, r["cautions"], b"", fig)


BUILDERS = ((SizeRequest, _size), (CorrelateRequest, _correlate), (PatternRequest, _patterns),
            (TrendRequest, _trend), (CompareRequest, _compare), (ChangesRequest, _changes))


def section(wh: Warehouse, analysis: Any, dpi: int = 110) -> Section:
    """One analysis run, drawn and read."""
    for kind, build in BUILDERS:
        if isinstance(analysis, kind):
            s = build(wh, analysis)
            s.image = plot.to_bytes(s.figure, "png", dpi=dpi)
            return s
    raise WarehouseError(f"cannot put a {type(analysis).__name__} in a report")


def data_facts(wh: Warehouse) -> dict[str, Any]:
    """What the report describes: zone, range, counters, points, rows quarantined, when it was made."""
    status = catalog.status(wh)
    return {"zone": wh.zone, "counters": status.get("counters"), "points": status.get("points"),
            "first_ts": status.get("first_ts"), "last_ts": status.get("last_ts"),
            "rows_quarantined": status.get("rows_quarantined"),
            "generated": datetime.now(timezone.utc).astimezone().strftime("%Y-%m-%d %H:%M %Z")}


def build_report(wh: Warehouse, req: ReportRequest) -> Report:
    if not req.analyses:
        raise WarehouseError("nothing to report: give SELECTORS, or --suspects, --patterns, --trend,"
                             " --compare or --changes")
    sections = [section(wh, a, req.dpi) for a in req.analyses]
    report = Report(req.title, data_facts(wh), sections)
    report.html = to_html(report)
    return report


def write_report(wh: Warehouse, req: ReportRequest, out: Path, pdf: Path | None = None) -> dict[str, Any]:
    """Build the report, write the HTML (and the PDF), and say what was written."""
    started = time.monotonic()
    out, pdf = Path(out), Path(pdf) if pdf else None
    if out.suffix.lower() not in (".html", ".htm"):
        raise WarehouseError(f"cannot write the report to {str(out)!r}: the file name must end in .html")
    if pdf is not None and pdf.suffix.lower() != ".pdf":
        raise WarehouseError(f"cannot write a PDF to {str(pdf)!r}: the file name must end in .pdf")
    report = build_report(wh, req)
    try:
        out.write_text(report.html, encoding="utf-8")
        if pdf is not None:
            write_pdf(report, pdf)
    except OSError as exc:
        raise WarehouseError(f"cannot write the report: {exc.strerror}: {exc.filename}") from exc
    return {"out": str(out), "bytes": out.stat().st_size, "pdf": str(pdf) if pdf else None,
            "sections": [{"kind": s.kind, "heading": s.heading, "reading": s.reading[0]} for s in report.sections],
            "seconds": round(time.monotonic() - started, 2)}


# -- HTML ----------------------------------------------------------------------------------------------------

STYLE = """
body { font: 15px/1.5 Georgia, 'Times New Roman', serif; color: #22303c; background: #fbfaf6;
       max-width: 60em; margin: 2em auto; padding: 0 1.2em; }
h1, h2, h3 { font-family: 'Helvetica Neue', Arial, sans-serif; color: #0d4a57; }
h1 { border-bottom: 3px solid #16767a; padding-bottom: .2em; }
h2 { margin-top: 2.2em; border-bottom: 1px solid #e3e0d6; }
h3 { font-size: 1em; margin-bottom: .2em; }
.facts, .numbers { border-collapse: collapse; font: 13px 'Helvetica Neue', Arial, sans-serif; }
.facts td, .numbers td, .numbers th { padding: .2em .8em .2em 0; border-bottom: 1px solid #e3e0d6;
       text-align: left; vertical-align: top; }
.numbers th { color: #7a8690; font-weight: normal; }
.reading { background: #eef6f5; border-left: 4px solid #16767a; padding: .6em 1em; }
.cautions li { color: #7d3322; }
figure { margin: 1em 0; } figure img { max-width: 100%; border: 1px solid #e3e0d6; }
figcaption { font-size: 12px; color: #7a8690; }
nav ol { columns: 2; }
"""


def _table(rows: list[tuple[str, ...]], cls: str = "numbers") -> str:
    if not rows:
        return ""
    head, *body = rows
    out = [f'<table class="{cls}"><tr>' + "".join(f"<th>{html.escape(c)}</th>" for c in head) + "</tr>"]
    out += ["<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in row) + "</tr>" for row in body]
    return "\n".join(out) + "</table>"


def _section_html(k: int, s: Section) -> str:
    img = base64.b64encode(s.image).decode("ascii")
    parts = [f'<section id="{s.kind}-{k}" class="{s.kind}">', f"<h2>{html.escape(s.heading)}</h2>",
             '<div class="reading">' + "".join(f"<p>{html.escape(t)}</p>" for t in s.reading) + "</div>",
             f'<figure><img alt="{html.escape(s.heading)}" src="data:image/png;base64,{img}">'
             f"<figcaption>{html.escape(getattr(s.figure, '_warehouse_title', s.heading))}</figcaption></figure>",
             "<h3>Key numbers</h3>", _table(s.numbers),
             "<h3>Method and assumptions</h3>", f"<p>{html.escape(METHODS[s.kind])}</p>",
             "<h3>Cautions</h3>", '<ul class="cautions">' + "".join(f"<li>{html.escape(c)}</li>" for c in s.cautions)
             + "</ul>", "</section>"]
    return "\n".join(parts)


def to_html(report: Report) -> str:
    f = report.facts
    facts = [("", ""), ("time zone", str(f["zone"])), ("data from", str(f["first_ts"])), ("data to", str(f["last_ts"])),
             ("counters", f"{f['counters']:,}" if f["counters"] is not None else "-"),
             ("points", f"{f['points']:,}" if f["points"] is not None else "-"),
             ("rows quarantined at load", str(f["rows_quarantined"])), ("generated", f["generated"])]
    summary = "".join(f"<li><a href=\"#{s.kind}-{k}\">{html.escape(TITLES[s.kind])}</a>: {html.escape(s.reading[0])}</li>"
                      for k, s in enumerate(report.sections, 1))
    body = [f"<h1>{html.escape(report.title)}</h1>", _table(facts, "facts"),
            '<section id="summary"><h2>Summary</h2><ol>' + summary + "</ol></section>"]
    body += [_section_html(k, s) for k, s in enumerate(report.sections, 1)]
    body.append('<section id="before-you-act"><h2>Before you act</h2><ul class="cautions">'
                + "".join(f"<li>{html.escape(c)}</li>" for c in BEFORE_YOU_ACT) + "</ul></section>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{html.escape(report.title)}</title><style>{STYLE}</style></head><body>\n"
            + "\n".join(body) + "\n</body></html>\n")


# -- PDF -----------------------------------------------------------------------------------------------------

def write_pdf(report: Report, path: Path) -> None:
    """A text page of readings and cautions, then each section's figure with its reading below."""
    import textwrap

    from matplotlib.backends.backend_pdf import PdfPages

    with PdfPages(path, metadata={"Title": report.title}) as pdf:
        lines = [report.title, ""]
        for k, s in enumerate(report.sections, 1):
            lines += textwrap.wrap(f"{k}. {TITLES[s.kind]}: {' '.join(s.reading)}", 100) + [""]
        lines += ["Before you act:"] + [w for c in BEFORE_YOU_ACT for w in textwrap.wrap(f"- {c}", 100)]
        page = plot._new_figure(10.4)
        page.text(0.04, 0.97, "\n".join(lines), va="top", ha="left", fontsize=7.5, family="serif")
        pdf.savefig(page)
        for s in report.sections:
            pdf.savefig(s.figure)
