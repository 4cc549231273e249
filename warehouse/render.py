"""Render rows and mappings as an aligned table, CSV or JSON (stable snake_case keys)."""
from __future__ import annotations

import csv
import datetime as dt
import io
import json
import textwrap
from collections.abc import Sequence
from typing import Any

import numpy as np

from warehouse.timeutil import format_duration


def _jsonable(value: Any) -> Any:
    if isinstance(value, (dt.datetime, dt.date)):
        return value.isoformat()
    if hasattr(value, "item"):
        value = value.item()
    if isinstance(value, float) and (value != value or value in (float("inf"), float("-inf"))):
        return None
    if isinstance(value, list):
        return [_jsonable(v) for v in value]
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
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




def _num(value: float | None, unit: str = "") -> str:
    if value is None:
        return "-"
    text = f"{value:,.4g}" if abs(value) < 1000 else f"{value:,.0f}"
    return f"{text} {unit}".rstrip()


def render_sizing(r: dict[str, Any]) -> str:
    """The sizing figures side by side, each with what it guarantees."""
    u = r["unit"] or ""
    p = r["coverage_target"]
    head = (f"size {r['selector']}: {r['counters']} counter(s), combine {r['combine']}, bucket {r['bucket_seconds']} s,"
            f" window {r['window']}" + (f" ({r['busiest_hours']} h/day)" if r["busiest_hours"] else "")
            + f", days {r['days']}, {_text(r['first_ts'])} .. {_text(r['last_ts'])}")
    rows = [
        ("peak (max)", _num(r["max"], u), "every observed bucket was at or below it; nothing to spare"),
        ("p99", _num(r["p99"], u), "99% of observed buckets at or below (empirical, this period only)"),
        ("p95", _num(r["p95"], u), "95% of observed buckets at or below (empirical, this period only)"),
        (f"p{p * 100:g} [{r['confidence']:.0%} CI]",
         f"{_num(r['quantile_at_target'], u)} [{_num(r['quantile_ci_low'])}, {_num(r['quantile_ci_high'])}]",
         f"moving-block bootstrap interval; about {r['n_effective']:.0f} independent of {r['n']} samples"),
        (f"bound (Cantelli {p:.0%})", _num(r["bound"], u),
         f"mean + {r['k']:.3g} sd: at least {p:.0%} of samples at or below for ANY distribution"
         f" (observed {r['coverage_observed']:.2%}; two-sided Chebyshev reading {r['chebyshev_two_sided_coverage']:.1%})"),
        ("mean", _num(r["mean"], u), "sizing to it leaves the busy part of every day short"),
        ("sd (population)", _num(r["sd"], u), ""),
    ]
    if r["capacity"] is not None:
        rows.append(("capacity", _num(r["capacity"], u),
                     f"{r['above_capacity_fraction']:.2%} of samples above it; headroom over the bound {r['headroom']:.1%}"))
    width = max(len(a) for a, _, _ in rows)
    vwidth = max(len(b) for _, b, _ in rows)
    lines = [head, ""] + [f"{a.ljust(width)}  {b.rjust(vwidth)}  {c}".rstrip() for a, b, c in rows]
    lines += ["", "cautions:"] + [f"  - {c}" for c in r["cautions"]]
    return "\n".join(lines)


def _cut(text: str, width: int) -> str:
    """Shorten from the middle so both the host and the counter name stay readable."""
    if len(text) <= width:
        return text
    keep = width - 1
    return text[:keep - keep // 2] + "~" + text[len(text) - keep // 2:]


def _notes(title: str, items: list[str]) -> list[str]:
    from textwrap import fill
    return ["", f"{title}:"] + [fill(c, 98, initial_indent="  - ", subsequent_indent="    ") for c in items]


def _fit(lines: list[str], width: int = 100) -> str:
    """Wrap the prose lines that would pass `width` columns (tables are built narrower)."""
    from textwrap import fill
    physical = [part for line in lines for part in line.split("\n")]
    return "\n".join(fill(line, width - 2, subsequent_indent="  ") if len(line) > width else line for line in physical)


def _aligned(rows: list[tuple[str, ...]], right: frozenset[int] | set[int] = frozenset()) -> list[str]:
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    return ["  ".join(c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in enumerate(zip(row, widths))).rstrip()
            for row in rows]


def render_compare(r: dict[str, Any]) -> str:
    """Before and after side by side, the shift with its interval, the tests, the verdict."""
    u = r["unit"] or ""
    conf = f"{r['confidence']:.0%}"
    head = (f"compare {r['selector']}: {r['counters']} counter(s), combine {r['combine']}, bucket"
            f" {r['bucket_seconds']} s, window {r['window']}, days {r['days']}")
    b, a = r["before"], r["after"]
    rows = [("", f"before ({b['period']})", f"after ({a['period']})"),
            ("n / n_eff", f"{b['n']} / {b['n_effective']:.0f}", f"{a['n']} / {a['n_effective']:.0f}"),
            ("mean", _num(b["mean"], u), _num(a["mean"], u))]
    rows += [(f"p{p} [{conf}]", *(f"{_num(s[f'p{p}'], u)} [{_num(s[f'p{p}_low'])}, {_num(s[f'p{p}_high'])}]"
                                   for s in (b, a))) for p in (50, 95, 99)]
    lines = [head, ""] + _aligned(rows) + [
        "", f"shift (Hodges-Lehmann, after - before): {_num(r['shift'], u)}"
            f" [{_num(r['shift_low'], u)}, {_num(r['shift_high'], u)}] ({conf}, {r['shift_method']})",
        f"Mann-Whitney: P(after > before) = {r['prob_after_higher']:.3f}, p = {r['p_value']:.2g} with effective"
        f" sample sizes (p = {r['p_value_independent']:.2g} if the samples were independent)",
        f"Kolmogorov-Smirnov: D = {r['ks_d']:.3f}, p = {r['ks_p']:.2g} (effective sizes)",
        "", f"verdict: {r['verdict']}"]
    return _fit(lines + _notes("cautions", r["cautions"]))


def render_changes(r: dict[str, Any]) -> str:
    """The counters that moved most, with score, direction, size in the unit and q-value."""
    head = (f"changes in {r['period']} ({_text(r['start'])} .. {_text(r['end'])}) against {r['history_periods']}"
            f" earlier periods ({', '.join(r['history_labels'][:3])}{', ...' if r['history_periods'] > 3 else ''}):"
            f" {r['counters_scored']} counters scored, {r['passing']} with q < {r['fdr']:g}")
    rows = [("#", "key", "score", "mean now", "usual", "change", "q")]
    for i, x in enumerate(r["results"], 1):
        pct = f"{x['change_pct']:+.1f}%" if x["change_pct"] is not None else "-"
        rows.append((f"{i}{'!' if x['note'] else ''}", _cut(x["key"], 42), f"{x['score']:+.1f}",
                     _num(x["mean"], x["unit"] or ""), _num(x["history_mean"]), pct, f"{x['q']:.2g}"))
    lines = [head, ""] + (_aligned(rows, {2, 3, 4, 5}) if r["results"] else ["  no counter to score"])
    lines += ["", "score: (period mean - median of the history's period means) / (1.4826 MAD of those means)",
              "q: Benjamini-Hochberg over every counter scored; 5!: an unusual number of samples (json: note)"]
    if r["new"]:
        lines += _notes(f"new in the period (fewer than 2 earlier periods with samples): {len(r['new'])}", r["new"][:20])
    if r["silent"]:
        lines += _notes(f"silent in the period (samples before, none now): {len(r['silent'])}", r["silent"][:20])
    return _fit(lines + _notes("cautions", r["cautions"]))


def render_limits(r: dict[str, Any]) -> str:
    """Per counter: its levels, time and share beyond each, and the longest stretch beyond warn."""
    head = (f"limits over {r['period']} ({_text(r['first_ts'])} .. {_text(r['last_ts'])}): {r['counters']} counters"
            f" with levels from {', '.join(r['files'])}")
    rows = [("key", "warn / crit", ">warn", "share", ">crit", "share", "longest")]
    for x in r["results"]:
        sign = ">" if x["direction"] == "above" else "<"
        rows.append((_cut(x["key"], 38), f"{sign}{x['warn']:g} / {x['critical']:g}",
                     format_duration(x["warn_seconds"]) if x["warn_seconds"] else "-", f"{x['warn_share']:.1%}",
                     format_duration(x["critical_seconds"]) if x["critical_seconds"] else "-",
                     f"{x['critical_share']:.1%}",
                     format_duration(x["longest_warn_seconds"]) if x["longest_warn_seconds"] else "-"))
    lines = [head, ""] + _aligned(rows, {2, 3, 4, 5, 6})
    lines += ["", "longest: the longest stretch of consecutive samples beyond warn (start times in --format json)"]
    return _fit(lines + _notes("cautions", r["cautions"]))


def _bar(r: float, width: int = 12) -> str:
    cells = int(round(abs(r) * width))
    return ("#" * cells).ljust(width)


def _lag_words(lag: int, bucket_seconds: int) -> str:
    if lag == 0:
        return "same time"
    span = format_duration(abs(lag) * bucket_seconds)
    return f"leads by {span}" if lag > 0 else f"follows by {span}"


def render_correlations(r: dict[str, Any]) -> str:
    """Ranked suspects with a bar per r, the direction in words, the lag, and the caution."""
    head = (f"correlate {r['target']} ({r['method']}, bucket {r['bucket_seconds']} s, lags -{r['max_lag']}..+{r['max_lag']},"
            f" rhythm {'removed' if r['rhythm'] == 'remove' else 'kept'}):"
            f" {r['tested']} tests over {r['counters_tested']} counters, {r['skipped']} skipped (constant or"
            f" overlap too short); {r['passing']} pass q < {r['fdr']:g}")
    rows = [("#", "key", "r", "", "direction", "lag", "n", "n_eff", "q")]
    for i, row in enumerate(r["results"], 1):
        rows.append((str(i), row["key"], f"{row['r']:+.3f}", _bar(row["r"]),
                     "moves with" if row["r"] > 0 else "moves against", _lag_words(row["lag"], r["bucket_seconds"]),
                     str(row["n"]), f"{row['n_effective']:.0f}",
                     f"{row['q']:.2g}" + (" *" if row["q"] < r["fdr"] else "")))
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    lines = [head, ""] + ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows]
    lines += ["", f"* q < {r['fdr']:g} (Benjamini-Hochberg over all {r['tested']} tests; p-values use the"
              " autocorrelation-adjusted n_eff)", r["lag_convention"]] + [f"caution: {c}" for c in r["cautions"]]
    return "\n".join(lines)


def render_pairs(r: dict[str, Any]) -> str:
    head = (f"strongest pairs among {r['counters']} counters ({r['method']}, bucket {r['bucket_seconds']} s):"
            f" {r['tested']} pairs tested")
    rows = [("#", "a", "b", "r", "n", "q")]
    rows += [(str(i), p["a"], p["b"], f"{p['r']:+.3f}", str(p["n"]), f"{p['q']:.2g}") for i, p in enumerate(r["pairs"], 1)]
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    lines = [head, ""] + ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows]
    return "\n".join(lines + [""] + [f"caution: {c}" for c in r["cautions"]])


def render_patterns(r: dict[str, Any], *, max_episodes: int = 10) -> str:
    u = r["unit"] or ""
    lines = [f"patterns {r['selector']}: {r['counters']} counter(s), combine {r['combine']}, bucket {r['bucket_seconds']} s,"
             f" {_text(r['first_ts'])} .. {_text(r['last_ts'])}", "", "periods (Fisher's g against an AR(1) background):"]
    if not r["periods"]:
        lines.append("  none at p < 0.01")
    for p in r["periods"]:
        shown = ", ".join(format_duration(h) for h in p["harmonics"][:4])
        more = f" and {len(p['harmonics']) - 4} more" if len(p["harmonics"]) > 4 else ""
        harmonics = f", harmonics {shown}{more}" if p["harmonics"] else ""
        lines.append(f"  every {p['label']}: {p['strength']:.1%} of the variance, p = {p['p']:.2g},"
                     f" autocorrelation at that lag {p['acf']:+.2f}{harmonics}")
    eps = r["episodes"]
    c = r["episode_clustering"]
    lines += ["", f"episodes above {_num(r['threshold'], u)} ({r['threshold_kind']}): {len(eps)}"]
    for e in sorted(eps, key=lambda e: -e["peak"])[:max_episodes]:
        lines.append(f"  {_text(e['start'])} for {format_duration(e['seconds'])}, peak {_num(e['peak'], u)}")
    if c.get("hour_p") is not None:
        busiest_hour = int(np.argmax(c["by_hour"]))
        busiest_day = c["weekday_names"][int(np.argmax(c["by_weekday"]))]
        lines.append(f"  starts by hour: p = {c['hour_p']:.2g} (most at {busiest_hour:02d}:00);"
                     f" by weekday: p = {c['weekday_p']:.2g} (most on {busiest_day})"
                     + ("; they cluster" if c["clustered"] else ""))
    lines += ["", "calendar (mean by weekday x hour, warehouse zone):"]
    lines += _calendar_grid(r["calendar"])
    lines += ["", "level shifts:"]
    lines += [f"  {_text(cp['ts'])}: mean {_num(cp['before_mean'], u)} -> {_num(cp['after_mean'], u)}"
              for cp in r["change_points"]] or ["  none"]
    lines += ["", "cautions:"] + [f"  - {x}" for x in r["cautions"]]
    return "\n".join(lines)


def _calendar_grid(cells: list[dict[str, Any]]) -> list[str]:
    days = ["mon", "tue", "wed", "thu", "fri", "sat", "sun"]
    table = {(c["weekday"], c["hour"]): c["mean"] for c in cells}
    width = max([len(_num(v)) for v in table.values()] + [3])
    out = ["  hour " + " ".join(d.rjust(width) for d in days)]
    for hour in range(24):
        out.append(f"  {hour:02d}   " + " ".join(_num(table.get((d, hour))).rjust(width) for d in days))
    return out


def render_rollup(summaries: list[dict[str, Any]]) -> str:
    """The one line a scheduled rollup logs."""
    parts = []
    for s in summaries:
        if not s["periods"]:
            parts.append(f"{s['period']}: nothing due")
            continue
        span = s["first_period"].isoformat()
        if s["last_period"] != s["first_period"]:
            span += f" .. {s['last_period'].isoformat()}"
        parts.append(f"{s['period']}: {s['periods']} period(s) {span}, {s['rows']} rows"
                     + (f", {s['incomplete_rows']} still open" if s["incomplete_rows"] else ""))
    took = summaries[0]["seconds"] if summaries else 0.0
    cautions = "".join(f"\ncaution: {c}" for s in summaries for c in s.get("cautions", []))
    return f"rollup --{summaries[0]['mode']}: " + "; ".join(parts) + f" ({took:.1f} s)" + cautions


def _week_words(c: dict[str, Any] | None, horizon: int) -> str:
    if c is None:
        return "-"
    if c["status"] == "already":
        return "already at or above it"
    far = f"not within {horizon} weeks"
    if c["status"] == "not_within":
        return far + (f" (upper growth: {c['week_early'].isoformat()})" if c["week_early"] else "")
    late = c["week_late"].isoformat() if c["week_late"] else far
    return f"week of {c['week'].isoformat()} [{c['week_early'].isoformat()} .. {late}]"


def _growth(fit: dict[str, Any] | None, unit: str) -> str:
    if fit is None:
        return "-"
    return (f"{fit['slope_per_week']:+,.4g} {unit}/week".replace(" /", "/")
            + f" [{fit['slope_low']:+,.3g}, {fit['slope_high']:+,.3g}]")


def render_trend(r: dict[str, Any]) -> str:
    """One counter: its weekly values, growth and crossing; several: one line each."""
    ci = f"{r['confidence']:.0%}"
    lines = [f"trend {r['selector']}: weekly {r['stat']}" + (f", combine {r['combine']}" if r["combine"] else "")
             + f"; growth per week by Theil-Sen with its {ci} interval"
             + (f"; capacity {_num(r['capacity'])}" if r["capacity"] is not None else ""), ""]
    if len(r["series"]) == 1:
        s = r["series"][0]
        rows = [("week", r["stat"], "n / expected", "")]
        rows += [(w["week"].isoformat(), _num(w["value"], s["unit"]), f"{w['n']} / {w['expected_n'] or '-'}",
                  "" if w["complete"] else "open, not fitted") for w in s["weeks"]]
        widths = [max(len(row[i]) for row in rows) for i in range(4)]
        lines += ["  ".join(c.rjust(w) if i in (1, 2) else c.ljust(w) for i, (c, w) in enumerate(zip(row, widths))).rstrip()
                  for row in rows]
        lines += ["", f"growth: {_growth(s['fit'], s['unit'])}"]
        if r["capacity"] is not None and s["fit"] is not None:
            lines.append(f"reaches {_num(r['capacity'], s['unit'])}: {_week_words(s['fit']['crossing'], r['horizon_weeks'])}")
    else:
        rows = [("key", "weeks", f"last {r['stat']}", "growth per week [interval]")
                + (("reaches capacity",) if r["capacity"] is not None else ())]
        for s in r["series"]:
            fit = s["fit"]
            last = s["weeks"][-1]["value"] if s["weeks"] else None
            row = (s["key"], str(fit["weeks_used"] if fit else len(s["weeks"])), _num(last, s["unit"]),
                   _growth(fit, s["unit"]))
            if r["capacity"] is not None:
                row += (_week_words(fit["crossing"] if fit else None, r["horizon_weeks"]),)
            rows.append(row)
        widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
        lines += ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows]
    if r["cautions"]:
        lines += ["", "cautions:"] + [textwrap.fill(c, 98, initial_indent="  - ", subsequent_indent="    ")
                                      for c in r["cautions"]]
    return "\n".join(lines)


def render_check(report: dict[str, Any]) -> str:
    """`warehouse check`: one line per problem; with --deep the damaged files, with --repair what was lost."""
    lines = ["ok: catalog and files agree" if report["ok"] else "problems found:"]
    for key in ("missing", "orphans", "stale_staging"):
        lines += [f"  {key.replace('_', ' ')}: {item}" for item in report[key]]
    if report["fixed"]:
        lines.append("  orphans and stale staging folders deleted")
    if report.get("deep"):
        lines += [f"  damaged: {d['relpath']} ({d['reason']})" for d in report["damaged"]]
        lines += [textwrap.fill(f"repaired: {r['lost']}", 98, initial_indent="  ", subsequent_indent="    ")
                  for r in report["repaired"]]
        unverified = report["files_without_checksum"]
        lines.append(f"deep check: {report['files_checked']} files re-read"
                     + (f", {unverified} without a recorded checksum (row counts and decoding only)" if unverified else ""))
    return "\n".join(lines)
