"""Figures for size, correlate, patterns, trend, compare and changes, written as PNG or SVG.

matplotlib is imported here only, and this module only when a plot is asked for, so the command
line starts without it. Figures are drawn on the Agg canvas without pyplot (no global state), at
A4 width (7.2 in, about 18 cm). The palette is our own: dark ink, a teal for the measured series,
amber for the windows and episodes, brick for limits and bounds; signed correlations use a
diverging map from brick (against) through paper white to teal (with).
"""
from __future__ import annotations

import functools
import io
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.timeutil import DAY_NAMES, format_duration

INK = "#22303c"
MUTED = "#7a8690"
PAPER = "#fbfaf6"
GRID = "#e3e0d6"
TEAL = "#16767a"
DEEP = "#0d4a57"
AMBER = "#d9900b"
SAND = "#f3dfae"
BRICK = "#b34a32"
PLUM = "#6b4e8a"
MOSS = "#5c8a2e"
SUSPECTS = (BRICK, PLUM, MOSS, AMBER)
WIDTH_IN = 7.2
FORMATS = (".png", ".svg")
ENVELOPE_POINTS = 1200   # long series are drawn as a min/max band of this many slices plus their mean


def check_path(path: Path) -> None:
    """Refuse anything but .png and .svg before any work is done."""
    if Path(path).suffix.lower() not in FORMATS:
        raise WarehouseError(f"cannot write a plot to {str(path)!r}: the file name must end in .png or .svg")


STYLE = {"font.size": 8, "axes.titlesize": 9, "axes.labelsize": 8, "axes.edgecolor": MUTED,
         "axes.labelcolor": INK, "xtick.color": INK, "ytick.color": INK, "text.color": INK,
         "axes.facecolor": "white", "svg.fonttype": "none", "axes.grid": True, "grid.color": GRID,
         "grid.linewidth": 0.6, "axes.axisbelow": True, "legend.fontsize": 7, "legend.frameon": False}


def _new_figure(height_in: float) -> Any:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(WIDTH_IN, height_in), layout="constrained", facecolor=PAPER)
    FigureCanvasAgg(fig)
    return fig


def _styled(draw: Callable[..., Any]) -> Callable[..., Any]:
    """Draw inside our rc settings, so fonts and colours apply to every artist created."""
    @functools.wraps(draw)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        import matplotlib

        with matplotlib.rc_context(STYLE):
            return draw(*args, **kwargs)
    return wrapper


def save(fig: Any, path: Path, *, dpi: int = 150) -> Path:
    """Write the figure as PNG or SVG (chosen by the suffix), its title in the file's metadata."""
    path = Path(path)
    check_path(path)
    title = getattr(fig, "_warehouse_title", "")
    meta = {"Title": title} if title else {}
    import matplotlib

    with matplotlib.rc_context(STYLE):   # svg.fonttype is read when saving: keep text as <text>
        fig.savefig(path, format=path.suffix[1:].lower(), dpi=dpi, metadata=meta, facecolor=fig.get_facecolor())
    return path


def to_bytes(fig: Any, fmt: str = "png", *, dpi: int = 110) -> bytes:
    import matplotlib

    buf = io.BytesIO()
    title = getattr(fig, "_warehouse_title", "")
    with matplotlib.rc_context(STYLE):
        fig.savefig(buf, format=fmt, dpi=dpi, metadata={"Title": title} if title else {}, facecolor=fig.get_facecolor())
    return buf.getvalue()


def _title(fig: Any, title: str, subtitle: str = "", caution: str = "") -> None:
    """Title, what was measured, and the caution a figure handed over alone must carry."""
    fig._warehouse_title = title
    fig.suptitle(title + (f"\n{subtitle}" if subtitle else "") + (f"\ncaution: {caution}" if caution else ""),
                 fontsize=9.5, color=INK, x=0.01, horizontalalignment="left")


def _num(value: float | None, unit: str = "") -> str:
    if value is None or not np.isfinite(value):
        return "-"
    text = f"{value:,.4g}" if abs(value) < 1000 else f"{value:,.0f}"
    return f"{text} {unit}".rstrip()


def _unit_label(unit: str) -> str:
    return unit if unit else "value (no unit)"


def _times(us: np.ndarray) -> pd.DatetimeIndex:
    return pd.DatetimeIndex(pd.to_datetime(np.asarray(us, dtype=np.int64), unit="us", utc=True))


def _time_axis(ax: Any, zone: str) -> None:
    import matplotlib.dates as mdates
    from zoneinfo import ZoneInfo

    tz = ZoneInfo(zone)
    locator = mdates.AutoDateLocator(tz=tz, minticks=4, maxticks=9)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, tz=tz))
    ax.set_xlabel(f"time ({zone})")


def _draw_series(ax: Any, times_us: np.ndarray, values: np.ndarray, color: str, label: str | None = None,
                 lw: float = 0.7) -> None:
    """A line, or for a long series a min/max band per slice with the slice means on top, so
    short peaks stay visible and the file stays small."""
    t = _times(times_us)
    if len(values) <= 2 * ENVELOPE_POINTS:
        ax.plot(t, values, color=color, lw=lw, label=label)
        return
    edges = np.linspace(0, len(values), ENVELOPE_POINTS + 1).astype(int)
    lo, hi, mid, at = [], [], [], []
    for a, b in zip(edges[:-1], edges[1:]):
        part = values[a:b]
        part = part[np.isfinite(part)]
        at.append(t[a])
        if part.size:
            lo.append(part.min()), hi.append(part.max()), mid.append(part.mean())
        else:
            lo.append(np.nan), hi.append(np.nan), mid.append(np.nan)
    ax.fill_between(at, lo, hi, color=color, alpha=0.28, lw=0, step="post")
    ax.plot(at, mid, color=color, lw=lw, label=label, drawstyle="steps-post")


def _shade(ax: Any, times_us: np.ndarray, mask: np.ndarray, bucket_us: int, color: str, label: str,
           alpha: float = 1.0) -> None:
    """Shade the buckets where mask holds, full height, as one collection (thousands of episodes
    as separate spans would take seconds to lay out)."""
    if not mask.any():
        return
    t = _times(np.r_[times_us, times_us[-1] + bucket_us])
    where = np.r_[mask, False]
    ax.fill_between(t, 0, 1, where=where, step="post", transform=ax.get_xaxis_transform(), color=color,
                    alpha=alpha, lw=0, zorder=0, label=label)


def _episode_mask(times_us: np.ndarray, episodes: list[dict[str, Any]]) -> np.ndarray:
    mask = np.zeros(len(times_us), dtype=bool)
    for e in episodes:
        a, b = (int(pd.Timestamp(e[k]).value // 1000) for k in ("start", "end"))
        mask[np.searchsorted(times_us, a):np.searchsorted(times_us, b)] = True
    return mask


def _ecdf(ax: Any, x: np.ndarray, color: str, label: str) -> None:
    xs = np.sort(x)
    ax.step(xs, np.arange(1, len(xs) + 1) / len(xs), where="post", color=color, lw=1.1, label=label)


# -- size ----------------------------------------------------------------------------------------------

@_styled
def size_figure(result: dict[str, Any], series: Any) -> Any:
    """The combined series with mean, p95, peak and the bound; busiest windows shaded; the ECDF beside it."""
    u = result["unit"] or ""
    fig = _new_figure(3.9)
    grid = fig.add_gridspec(1, 4)
    ax, side = fig.add_subplot(grid[0, :3]), fig.add_subplot(grid[0, 3])
    _draw_series(ax, series.times, series.values, TEAL, "combined series")
    if result["window"] != "all" or result["days"] not in ("mon-sun", None):
        _shade(ax, series.times, series.mask, result["bucket_seconds"] * 1_000_000, AMBER,
               "sized buckets (window and days)", alpha=0.3)
    lines = (("peak", result["max"], INK, ":"), ("p95", result["p95"], AMBER, "--"),
             (f"bound (Cantelli {result['coverage_target']:.0%})", result["bound"], BRICK, "-"),
             ("mean", result["mean"], MUTED, "-."))
    for name, value, color, style in lines:
        ax.axhline(value, color=color, ls=style, lw=1.1)
        side.axvline(value, color=color, ls=style, lw=1.1)
        ax.annotate(f"{name} {_num(value, u)}", xy=(1.0, value), xycoords=("axes fraction", "data"),
                    xytext=(-3, 2), textcoords="offset points", ha="right", va="bottom", fontsize=7, color=color)
    ax.set_ylabel(_unit_label(u))
    ax.set_ylim(min(0.0, float(np.nanmin(series.values))), max(result["bound"], result["max"]) * 1.18)
    _time_axis(ax, series.zone)
    ax.legend(loc="upper left", frameon=True, facecolor="white", edgecolor=GRID, ncols=2)
    x = series.values[series.mask]
    _ecdf(side, x[np.isfinite(x)], TEAL, "sized samples")
    side.axhline(result["coverage_observed"], color=BRICK, lw=0.8, ls=":")
    side.annotate(f"{result['coverage_observed']:.1%} of sized\nsamples at or\nbelow the bound", xy=(0.97, 0.04),
                  xycoords="axes fraction", ha="right", va="bottom", fontsize=7, color=BRICK,
                  bbox={"boxstyle": "square,pad=0.2", "fc": "white", "ec": "none"})
    side.set_xlabel(_unit_label(u))
    side.set_ylabel("share of sized samples at or below")
    side.set_ylim(0, 1.02)
    side.set_title("distribution (ECDF)")
    window = result["window"] + (f" ({result['busiest_hours']} h/day)" if result["busiest_hours"] else "")
    _title(fig, f"size {result['selector']}",
           f"{result['combine']} of {result['counters']} counter(s), {result['bucket_seconds']} s buckets,"
           f" window {window}, days {result['days']}; n = {result['n']:,}",
           "the bound describes the observed period only; repeat on other periods before buying")
    return fig


# -- correlate -----------------------------------------------------------------------------------------

def _diverging() -> Any:
    from matplotlib.colors import LinearSegmentedColormap
    return LinearSegmentedColormap.from_list("warehouse_signed", [BRICK, "#e9b9a5", "#f6f4ee", "#a9d3cf", DEEP])


def lag_words(lag: int, bucket_seconds: int) -> str:
    if lag == 0:
        return "same time"
    span = format_duration(abs(lag) * bucket_seconds)
    return f"leads by {span}" if lag > 0 else f"follows by {span}"


def _short(key: str, width: int = 46) -> str:
    if len(key) <= width:
        return key
    keep = width - 1
    return key[:keep - keep // 2] + "~" + key[len(key) - keep // 2:]


@_styled
def correlate_figure(result: dict[str, Any], overlay: list[Any], top: int = 10) -> Any:
    """Ranked suspects as bars of r with the lag written beside each, and the target with its first
    suspects overlaid (each scaled to its own 0..1 range) on a shared time axis."""
    rows = result["results"][:top]
    fig = _new_figure(2.2 + 0.24 * len(rows) + 2.4)
    grid = fig.add_gridspec(2, 1, height_ratios=[0.9 + 0.24 * len(rows), 2.4])
    bars, over = fig.add_subplot(grid[0]), fig.add_subplot(grid[1])
    cmap = _diverging()
    rs = np.array([row["r"] for row in rows])
    ypos = np.arange(len(rows))[::-1]
    bars.barh(ypos, rs, color=cmap((rs + 1) / 2), edgecolor=INK, lw=0.4)
    for y, row in zip(ypos, rows):
        mark = " *" if row["q"] < result.get("fdr", 0.05) else ""
        text = f"{row['r']:+.2f}{mark}  {lag_words(row['lag'], result['bucket_seconds'])}"
        # Negative bars get their label right of zero, clear of the counter names on the left.
        bars.annotate(text, xy=(max(row["r"], 0.0), y), xytext=(4, 0), textcoords="offset points",
                      ha="left", va="center", fontsize=7)
    bars.set_yticks(ypos, [_short(row["key"]) for row in rows], fontsize=7)
    bars.set_xlim(-1.35, 1.35)
    bars.axvline(0, color=INK, lw=0.6)
    bars.set_xlabel(f"{result['method']} r (* q < {result.get('fdr', 0.05)}; lag +k: the counter moves first)")
    for k, s in enumerate(overlay):
        v = s.values
        lo, hi = np.nanmin(v), np.nanmax(v)
        scaled = (v - lo) / (hi - lo) if hi > lo else v * 0
        color = INK if k == 0 else SUSPECTS[(k - 1) % len(SUSPECTS)]
        label = f"target: {_short(s.label, 40)}" if k == 0 else _short(s.label, 40)
        if k:
            row = result["results"][k - 1]
            label += f" ({lag_words(row['lag'], result['bucket_seconds'])})"
        over.plot(_times(s.times), scaled, color=color, lw=1.4 if k == 0 else 0.9, label=label)
    over.set_ylabel("each scaled to its own range (0-1)")
    over.set_ylim(-0.05, 1.55)
    _time_axis(over, overlay[0].zone if overlay else "UTC")
    over.legend(loc="upper left", ncols=1, fontsize=6.5)
    _title(fig, f"correlate {result['target']}",
           f"{result['method']}, {result['bucket_seconds']} s buckets, lags -{result['max_lag']}..+{result['max_lag']},"
           f" rhythm {result['rhythm']}: {result['passing']} of {result['tested']} tests pass q < {result['fdr']}",
           "correlation points where to look; it is not a cause")
    return fig


# -- patterns ------------------------------------------------------------------------------------------

def _sequential() -> Any:
    from matplotlib.colors import LinearSegmentedColormap
    return LinearSegmentedColormap.from_list("warehouse_level", ["#fbf7ea", SAND, "#7fbcb3", TEAL, DEEP])


@_styled
def patterns_figure(result: dict[str, Any], series: Any, spectrum: Any) -> Any:
    """Periodogram with the reported periods, the weekday x hour heat map, and the series with
    episodes and level shifts marked."""
    fig = _new_figure(8.6)
    grid = fig.add_gridspec(3, 1, height_ratios=[2.2, 2.3, 2.6])
    _periodogram_panel(fig.add_subplot(grid[0]), result, spectrum)
    _calendar_panel(fig, fig.add_subplot(grid[1]), result, series.zone)
    _episodes_panel(fig.add_subplot(grid[2]), result, series)
    found = ", ".join(f"every {p['label']}" for p in result["periods"]) or "no period passed the test"
    _title(fig, f"patterns {result['selector']}",
           f"{result['bucket_seconds']} s buckets: {found}; {len(result['episodes'])} episode(s);"
           f" {len(result['change_points'])} level shift(s)",
           "" if result["periods"] else "not finding a pattern does not prove there is none")
    return fig


def _periodogram_panel(ax: Any, result: dict[str, Any], spectrum: Any) -> None:
    u = result["unit"] or ""
    keep = spectrum.power > 0
    ax.loglog(spectrum.periods[keep], spectrum.power[keep], color=TEAL, lw=0.6)
    ax.invert_xaxis()
    for k, p in enumerate(result["periods"]):   # labels stepped down so neighbouring periods stay readable
        ax.axvline(p["seconds"], color=BRICK, lw=0.9, ls="--")
        ax.annotate(f"every {p['label']} ({p['strength']:.0%})", xy=(p["seconds"], 1.0),
                    xycoords=("data", "axes fraction"), xytext=(3, -10 - 10 * k), textcoords="offset points",
                    fontsize=7, color=BRICK)
    ticks = [s for s in (120, 600, 3600, 6 * 3600, 86400, 7 * 86400)
             if spectrum.periods.min() <= s <= spectrum.periods.max()]
    ax.set_xticks(ticks, [format_duration(s) for s in ticks])
    ax.minorticks_off()
    ax.set_xlabel("period (longer to the left)")
    ax.set_ylabel(f"power ({u}² per Hz)" if u else "power")
    ax.set_title("periodogram (detrended, Hann taper); dashed: periods that passed the test", loc="left")


def _calendar_panel(fig: Any, ax: Any, result: dict[str, Any], zone: str) -> None:
    table = np.full((7, 24), np.nan)
    for cell in result["calendar"]:
        table[DAY_NAMES.index(cell["weekday"]), cell["hour"]] = cell["mean"]
    image = ax.imshow(table, aspect="auto", cmap=_sequential(), interpolation="nearest")
    ax.set_yticks(range(7), DAY_NAMES)
    ax.set_xticks(range(0, 24, 2), [f"{h:02d}" for h in range(0, 24, 2)])
    ax.set_xlabel(f"hour of day ({zone})")
    ax.grid(False)
    ax.set_title("mean by weekday and hour", loc="left")
    fig.colorbar(image, ax=ax, label=f"mean ({_unit_label(result['unit'] or '')})", pad=0.01, fraction=0.04)


def _episodes_panel(ax: Any, result: dict[str, Any], series: Any) -> None:
    u = result["unit"] or ""
    _draw_series(ax, series.times, series.values, TEAL, "series")
    ax.axhline(result["threshold"], color=AMBER, lw=0.8, ls="--",
               label=f"episode threshold {_num(result['threshold'], u)} ({result['threshold_kind']})")
    _shade(ax, series.times, _episode_mask(series.times, result["episodes"]), result["bucket_seconds"] * 1_000_000,
           AMBER, "episodes", alpha=0.35)
    for k, c in enumerate(result["change_points"]):
        ts = pd.Timestamp(c["ts"])
        ax.axvline(ts, color=BRICK, lw=1.2, label="level shift" if k == 0 else None)
        ax.annotate(f"{ts:%a %d %b %H:%M}\n{_num(c['before_mean'])} → {_num(c['after_mean'], u)}",
                    xy=(ts, 0.0), xycoords=("data", "axes fraction"), xytext=(3, 4 + 22 * (k % 3)),
                    textcoords="offset points", fontsize=7, color=BRICK)
    ax.set_ylabel(_unit_label(u))
    _time_axis(ax, series.zone)
    ax.legend(loc="upper left", ncols=4, frameon=True, facecolor="white", edgecolor=GRID)
    ax.set_ylim(top=float(np.nanmax(series.values)) * 1.15)


# -- trend ---------------------------------------------------------------------------------------------

@_styled
def trend_figure(result: dict[str, Any], lines: list[Any], most: int = 4) -> Any:
    """Weekly statistic per series, the Theil-Sen line with its slope interval as a band, the
    capacity, and the crossing week with its interval."""
    import matplotlib.dates as mdates

    fig = _new_figure(3.8)
    ax = fig.add_subplot()
    colors = (TEAL, PLUM, MOSS, AMBER)
    unit = lines[0].unit if lines else ""
    for k, tl in enumerate(lines[:most]):
        color = colors[k % len(colors)]
        weeks = pd.to_datetime(pd.Series(tl.weeks))
        ax.plot(weeks[tl.fitted], tl.values[tl.fitted], "o", color=color, ms=4, label=_short(tl.key, 44))
        ax.plot(weeks[~tl.fitted], tl.values[~tl.fitted], "o", mfc="white", color=color, ms=4,
                label="open or thin week (not fitted)" if (~tl.fitted).any() else None)
        fit = result["series"][k]["fit"]
        if tl.line is not None and fit is not None:
            _trend_line(ax, tl, fit, weeks, color, first=k == 0)
    if result["capacity"] is not None:
        ax.axhline(result["capacity"], color=BRICK, lw=1.3, label=f"capacity {_num(result['capacity'], unit)}")
    ax.set_ylabel(f"weekly {result['stat']} ({_unit_label(unit)})")
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%d %b\n%Y"))
    ax.set_xlabel("week (the Monday it begins, warehouse zone)")
    ax.legend(loc="upper left")
    _title(fig, f"trend {result['selector']}",
           f"weekly {result['stat']}" + (f", {result['combine']} of the counters" if result["combine"] else "")
           + f"; Theil-Sen line, {result['confidence']:.0%} band"
           + (f"; {len(lines) - most} more series not drawn" if len(lines) > most else ""),
           "the line extrapolates these weeks; projects, migrations and seasons break it"
           if result["capacity"] is not None else "")
    return fig


def _trend_line(ax: Any, tl: Any, fit: dict[str, Any], weeks: pd.Series, color: str, first: bool) -> None:
    """The fitted line and its band, drawn on to the latest crossing week when there is one."""
    origin = pd.Timestamp(fit["first_week"])
    end_x = (weeks.iloc[-1] - origin).days / 7 + 1
    crossing = fit.get("crossing") or {}
    last = crossing.get("week_late") or crossing.get("week")
    if last:
        end_x = max(end_x, (pd.Timestamp(last) - origin).days / 7 + 1)
    xs = np.linspace(0, end_x, 60)
    at = origin + pd.to_timedelta(xs * 7, unit="D")
    ax.plot(at, [tl.line.at(x) for x in xs], color=color, lw=1.2)
    ends = np.array([[tl.line.at(x, tl.line.slope_low), tl.line.at(x, tl.line.slope_high)] for x in xs])
    ax.fill_between(at, ends.min(axis=1), ends.max(axis=1), color=color, alpha=0.15, lw=0,
                    label=f"{tl.line.confidence:.0%} interval of the growth" if first else None)
    if crossing.get("week"):
        week = pd.Timestamp(crossing["week"])
        ax.axvline(week, color=BRICK, lw=1, ls="--")
        ax.annotate(f"reaches capacity in the week of {crossing['week']}", xy=(week, 0.02),
                    xycoords=("data", "axes fraction"), xytext=(3, 0), textcoords="offset points",
                    fontsize=7, color=BRICK)
    if crossing.get("week_early") and crossing.get("week_late"):
        ax.axvspan(pd.Timestamp(crossing["week_early"]), pd.Timestamp(crossing["week_late"]), color=BRICK,
                   alpha=0.08, lw=0)


# -- compare and changes -------------------------------------------------------------------------------

@_styled
def compare_figure(result: dict[str, Any], before: np.ndarray, after: np.ndarray) -> Any:
    """ECDFs of the two periods with their medians and p95s, and the Hodges-Lehmann shift."""
    u = result["unit"] or ""
    fig = _new_figure(3.6)
    ax = fig.add_subplot()
    b, a = result["before"], result["after"]
    _ecdf(ax, before, MUTED, f"before {b['period']} (n {b['n']:,})")
    _ecdf(ax, after, TEAL, f"after {a['period']} (n {a['n']:,})")
    for side, color in ((b, MUTED), (a, TEAL)):
        for p, level in (("p50", 0.5), ("p95", 0.95)):
            ax.plot([side[p]], [level], "o", color=color, ms=4)
    ax.annotate("", xy=(b["p50"] + result["shift"], 0.5), xytext=(b["p50"], 0.5),
                arrowprops={"arrowstyle": "->", "color": BRICK, "lw": 1.4})
    ax.annotate(f"shift {_num(result['shift'], u)} [{_num(result['shift_low'])}, {_num(result['shift_high'])}]"
                f" ({result['confidence']:.0%}, Hodges-Lehmann)", xy=(0.99, 0.04), xycoords="axes fraction",
                ha="right", fontsize=7.5, color=BRICK)
    ax.set_xlabel(_unit_label(u))
    ax.set_ylabel("share of samples at or below")
    ax.set_ylim(0, 1.02)
    ax.legend(loc="upper left")
    _title(fig, f"compare {result['selector']}",
           f"window {result['window']}, days {result['days']}: "
           + ("changed" if result["changed"] else "no clear change")
           + f" (Mann-Whitney p = {result['p_value']:.2g}, about {b['n_effective']:.0f} + {a['n_effective']:.0f}"
             " independent samples)",
           "a difference between two periods does not prove the change you made caused it")
    return fig


@_styled
def changes_figure(result: dict[str, Any], history: dict[str, list[float]], rows: int = 12) -> Any:
    """The counters that moved most, as bars of their score, each with a sparkline of its period
    means (history grey, the chosen period as a dot)."""
    listed = result["results"][:rows]
    fig = _new_figure(1.2 + 0.36 * max(len(listed), 1))
    if not listed:
        ax = fig.add_subplot()
        ax.axis("off")
        ax.text(0.5, 0.5, "no counter scored", ha="center")
    else:
        grid = fig.add_gridspec(len(listed), 2, width_ratios=[3, 1], hspace=0.0)
        top = max(abs(r["score"]) for r in listed) * 1.25 or 1
        for i, row in enumerate(listed):
            bar, spark = fig.add_subplot(grid[i, 0]), fig.add_subplot(grid[i, 1])
            color = BRICK if row["score"] > 0 else DEEP
            bar.barh([0], [row["score"]], color=color, height=0.6)
            pct = f"{row['change_pct']:+.0f}%" if row["change_pct"] is not None else ""
            bar.text(-top * 0.98, 0, _short(row["key"], 52), va="center", fontsize=6.5)
            bar.text(top * 0.98, 0, f"{row['score']:+.1f}  {pct}", va="center", ha="right", fontsize=6.5)
            bar.set_xlim(-top, top)
            bar.set_yticks([])
            bar.axvline(0, color=INK, lw=0.5)
            means = np.asarray(history.get(row["key"], []), dtype=float)
            if means.size:
                spark.plot(range(len(means) - 1), means[:-1], color=MUTED, lw=0.9, marker=".", ms=2)
                spark.plot([len(means) - 1], [means[-1]], "o", color=color, ms=3.5)
            spark.set_xticks([]), spark.set_yticks([])
            for ax in (bar, spark):
                ax.grid(False)
                for edge in ax.spines.values():
                    edge.set_visible(False)
            if i < len(listed) - 1:
                bar.set_xticks([])
        bar.set_xlabel("score: (period mean - usual mean) / robust spread of the history's means")
        spark.set_xlabel("period means, oldest first")
    _title(fig, f"changes {result['period']}",
           f"{result['counters_scored']} counters against {result['history_periods']} earlier period(s);"
           f" {result['passing']} pass q < {result['fdr']}")
    return fig


# -- one call per command (the CLI's --plot) -------------------------------------------------------------

def plot_size(wh: Warehouse, req: Any, result: dict[str, Any], path: Path, *, dpi: int = 150) -> Path:
    from warehouse import plotdata
    return save(size_figure(result, plotdata.size_series(wh, req)), path, dpi=dpi)


def plot_correlate(wh: Warehouse, req: Any, result: dict[str, Any], path: Path, *, dpi: int = 150) -> Path:
    from warehouse import plotdata
    if "results" not in result:
        raise WarehouseError("--plot draws target-vs-all rankings; with --pairs use --format json")
    return save(correlate_figure(result, plotdata.correlate_overlay(wh, req, result)), path, dpi=dpi)


def plot_patterns(wh: Warehouse, req: Any, result: dict[str, Any], path: Path, *, dpi: int = 150) -> Path:
    from warehouse import plotdata
    series = plotdata.patterns_series(wh, req)
    spectrum = plotdata.spectrum(series.values, result["bucket_seconds"])
    return save(patterns_figure(result, series, spectrum), path, dpi=dpi)


def plot_trend(result: dict[str, Any], path: Path, *, dpi: int = 150) -> Path:
    from warehouse import plotdata
    return save(trend_figure(result, plotdata.trend_lines(result)), path, dpi=dpi)


def plot_compare(wh: Warehouse, req: Any, result: dict[str, Any], path: Path, *, dpi: int = 150) -> Path:
    from warehouse import plotdata
    before, after = plotdata.compare_samples(wh, req)
    return save(compare_figure(result, before, after), path, dpi=dpi)


def plot_changes(wh: Warehouse, req: Any, result: dict[str, Any], path: Path, *, dpi: int = 150) -> Path:
    from warehouse import plotdata
    return save(changes_figure(result, plotdata.changes_history(wh, req, result, 12)), path, dpi=dpi)
