"""Plots: valid PNG and SVG files of the expected size and title, drawn from the very buckets the
figures came from (plotdata checked against each command's own numbers)."""
from __future__ import annotations

import json
import math
import struct
import xml.etree.ElementTree as ET
import zlib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

from warehouse import plot, plotdata
from warehouse.changes import ChangesRequest, find_changes
from warehouse.cli import cli
from warehouse.compare import CompareRequest, compare_periods
from warehouse.correlate import CorrelateRequest, correlate_target
from warehouse.home import open_warehouse
from warehouse.patterns import PatternRequest, find_patterns
from warehouse.sizing import SizeRequest, size_selector
from warehouse.trend import TrendRequest, trend

DPI = 50   # small files, fast tests; the width in pixels is still 7.2 in x dpi
HOST_CPU = "vdi-hv02/Processor/_Total/% Processor Time"
SCAN_DAY = ("2026-03-19T12:00", "2026-03-19T15:00")
WEEK = ("2026-03-09", "2026-03-16")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
SVG = "{http://www.w3.org/2000/svg}"


def png_chunks(data: bytes) -> list[tuple[bytes, bytes]]:
    """Every chunk of a PNG, each CRC checked (PNG specification, ISO/IEC 15948 section 5.3)."""
    assert data[:8] == PNG_SIGNATURE
    chunks, pos = [], 8
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        kind, body = data[pos + 4:pos + 8], data[pos + 8:pos + 8 + length]
        (crc,) = struct.unpack(">I", data[pos + 8 + length:pos + 12 + length])
        assert zlib.crc32(kind + body) == crc, kind
        chunks.append((kind, body))
        pos += 12 + length
    assert chunks[0][0] == b"IHDR" and chunks[-1][0] == b"IEND"
    return chunks


def check_png(path: Path, title: str, dpi: int = DPI) -> tuple[int, int]:
    data = path.read_bytes()
    chunks = png_chunks(data)
    width, height = struct.unpack(">II", chunks[0][1][:8])
    assert width == round(plot.WIDTH_IN * dpi)          # A4 width at the asked resolution
    assert 0.3 * width <= height <= 2.0 * width
    texts = dict(body.split(b"\0", 1) for kind, body in chunks if kind == b"tEXt")
    assert texts[b"Title"].decode("latin-1") == title
    assert 5_000 < len(data) < 2_000_000
    return width, height


def check_svg(path: Path, title: str) -> ET.Element:
    root = ET.parse(path).getroot()
    assert root.tag == f"{SVG}svg"
    assert root.get("width") == f"{plot.WIDTH_IN * 72:g}pt"
    dc_titles = [el.text for el in root.iter("{http://purl.org/dc/elements/1.1/}title")]
    assert title in dc_titles
    words = " ".join(el.text or "" for el in root.iter(f"{SVG}text"))
    assert title in words                                # the title is real text, searchable
    assert 5_000 < path.stat().st_size < 3_000_000
    return root


def svg_words(root: ET.Element) -> str:
    return " ".join(el.text or "" for el in root.iter(f"{SVG}text"))


# -- the data behind the plots equals what the commands measured ----------------------------------

def test_size_plot_shows_the_sized_buckets(demo_home: Path, tmp_path: Path) -> None:
    req = SizeRequest("san01/pool=*/*_iops", *WEEK, combine="sum", window="busiest-hours", days="mon-fri")
    with open_warehouse(demo_home) as wh:
        result = size_selector(wh, req)
        series = plotdata.size_series(wh, req)
        plot.plot_size(wh, req, result, tmp_path / "size.svg")
        plot.plot_size(wh, req, result, tmp_path / "size.png", dpi=DPI)
    x = series.values[series.mask]
    assert len(x) == result["n"] == 5 * 60                # 5 weekdays x 1 busiest hour of 1-minute buckets
    assert x.max() == pytest.approx(result["max"], rel=1e-12)
    assert x.mean() == pytest.approx(result["mean"], rel=1e-12)
    check_png(tmp_path / "size.png", "size san01/pool=*/*_iops")
    words = svg_words(check_svg(tmp_path / "size.svg", "size san01/pool=*/*_iops"))
    assert f"bound (Cantelli 95%) {result['bound']:,.0f}" in words and f"peak {result['max']:,.0f}" in words
    assert "time (Europe/Berlin)" in words                # axis labelled with the warehouse zone
    assert "caution: the bound describes the observed period only" in words   # carried by the figure itself


def test_correlate_plot_ranks_suspects_and_overlays_them(demo_home: Path, tmp_path: Path) -> None:
    req = CorrelateRequest(HOST_CPU, start=SCAN_DAY[0], end=SCAN_DAY[1], top=5)
    with open_warehouse(demo_home) as wh:
        result = correlate_target(wh, req)
        overlay = plotdata.correlate_overlay(wh, req, result)
        plot.plot_correlate(wh, req, result, tmp_path / "c.svg")
    assert [s.label for s in overlay] == [HOST_CPU] + [r["key"] for r in result["results"][:3]]
    assert all(len(s.values) == 180 for s in overlay)    # 3 hours of 1-minute buckets, under the overlay cap
    target, first = overlay[0].values, overlay[1].values
    from scipy.stats import spearmanr
    assert spearmanr(target, first).statistic == pytest.approx(result["results"][0]["r"], abs=1e-9)
    words = svg_words(check_svg(tmp_path / "c.svg", f"correlate {HOST_CPU}"))
    assert f"{result['results'][0]['r']:+.2f} *  same time" in words
    assert "caution: correlation points where to look; it is not a cause" in words


def test_overlay_cut_around_the_peak() -> None:
    values = np.zeros(1000)
    values[990] = 5.0
    cut = plotdata._around_peak(values, 240)
    assert (cut.start, cut.stop) == (760, 1000)
    values[:] = 0
    values[10] = 5.0
    assert plotdata._around_peak(values, 240) == slice(0, 240)


def test_spectrum_peaks_at_the_period_of_a_pulse_train() -> None:
    """A 2-minute pulse every 11 minutes (60 s buckets): the strongest period is 660 s, and the
    power equals scipy.signal.periodogram's on the same detrended input (the reference)."""
    rng = np.random.default_rng(8)
    k = np.arange(6000)
    x = 1.0 + 4.0 * ((k * 60 - 180) % 660 < 120) + rng.normal(0, 0.2, k.size)
    spec = plotdata.spectrum(x, 60)
    assert spec.periods[np.argmax(spec.power)] == pytest.approx(660, rel=0.01)
    freq, power = signal.periodogram(signal.detrend(x), fs=1 / 60, window="hann", detrend=False)
    assert np.allclose(spec.power[::-1], power[1:], rtol=1e-9, atol=1e-12)


def test_patterns_plot(demo_home: Path, tmp_path: Path) -> None:
    req = PatternRequest("san01/pool=vdi/write_latency_ms", "2026-03-02", "2026-03-05", max_period="2h")
    with open_warehouse(demo_home) as wh:
        result = find_patterns(wh, req)
        plot.plot_patterns(wh, req, result, tmp_path / "p.png", dpi=DPI)
        plot.plot_patterns(wh, req, result, tmp_path / "p.svg")
    check_png(tmp_path / "p.png", "patterns san01/pool=vdi/write_latency_ms")
    words = svg_words(check_svg(tmp_path / "p.svg", "patterns san01/pool=vdi/write_latency_ms"))
    assert "every 11 min" in words and "hour of day (Europe/Berlin)" in words
    assert all(day in words for day in ("mon", "tue", "sun"))   # the weekday x hour map


def test_episode_mask_marks_exactly_the_episode_buckets() -> None:
    import pandas as pd
    times = (pd.Timestamp("2026-03-02", tz="UTC").value // 1000) + np.arange(10) * 60_000_000
    start = pd.Timestamp("2026-03-02 00:02", tz="UTC").to_pydatetime()
    end = pd.Timestamp("2026-03-02 00:05", tz="UTC").to_pydatetime()
    mask = plot._episode_mask(times, [{"start": start, "end": end}])
    assert mask.tolist() == [False, False, True, True, True, False, False, False, False, False]


def test_trend_plot_line_is_the_reported_line(demo_home: Path, tmp_path: Path) -> None:
    req = TrendRequest("san01/pool=vdi/read_iops", combine="sum", capacity=12000)
    with open_warehouse(demo_home) as wh:
        result = trend(wh, req)
    (line,) = plotdata.trend_lines(result)
    fit = result["series"][0]["fit"]
    assert line.line.slope == pytest.approx(fit["slope_per_week"], rel=1e-12)
    assert line.line.slope_low == pytest.approx(fit["slope_low"], rel=1e-12)
    last_x = (fit["last_week"] - fit["first_week"]).days / 7
    assert line.line.at(last_x) == pytest.approx(fit["fitted_last"], rel=1e-12)
    plot.plot_trend(result, tmp_path / "t.png", dpi=DPI)
    check_png(tmp_path / "t.png", "trend san01/pool=vdi/read_iops")


def test_compare_plot_uses_the_tested_samples(demo_home: Path, tmp_path: Path) -> None:
    req = CompareRequest("san01/pool=vdi/read_iops", "2026-W11", "2026-W12")
    with open_warehouse(demo_home) as wh:
        result = compare_periods(wh, req)
        before, after = plotdata.compare_samples(wh, req)
        plot.plot_compare(wh, req, result, tmp_path / "cmp.svg")
    assert (len(before), len(after)) == (result["before"]["n"], result["after"]["n"])
    assert after.mean() == pytest.approx(result["after"]["mean"], rel=1e-12)
    words = svg_words(check_svg(tmp_path / "cmp.svg", "compare san01/pool=vdi/read_iops"))
    assert "Hodges-Lehmann" in words and "before 2026-W11" in words


def test_changes_sparklines_hold_the_scored_means(demo_home: Path, tmp_path: Path) -> None:
    """The sparkline's last point is the period mean that was scored; the median of the others is
    the history centre the score is measured from."""
    req = ChangesRequest(period="2026-W12", history=3, selector="san01/*")
    with open_warehouse(demo_home) as wh:
        result = find_changes(wh, req)
        history = plotdata.changes_history(wh, req, result, 12)
        plot.plot_changes(wh, req, result, tmp_path / "ch.png", dpi=DPI)
    assert len(history) == min(12, len(result["results"])) > 0
    for row in result["results"][:12]:
        means = np.asarray(history[row["key"]])
        assert len(means) == 4
        assert means[-1] == pytest.approx(row["mean"], rel=1e-9)
        assert np.nanmedian(means[:-1]) == pytest.approx(row["history_mean"], rel=1e-9)
    check_png(tmp_path / "ch.png", "changes 2026-W12")


# -- the command line --------------------------------------------------------------------------------

def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def test_cli_plot_option_writes_the_file_and_keeps_stdout_clean(demo_home: Path, tmp_path: Path) -> None:
    target = tmp_path / "spikes.png"
    result = run("--home", str(demo_home), "correlate", HOST_CPU, "--from", SCAN_DAY[0], "--to", SCAN_DAY[1],
                 "--format", "json", "--plot", str(target))
    assert result.exit_code == 0, result.stderr
    assert json.loads(result.stdout)["results"][0]["key"].endswith("scanagent/% Processor Time")
    assert result.stderr == f"plot written to {target}\n"
    check_png(target, f"correlate {HOST_CPU}", dpi=150)


@pytest.mark.parametrize("args", [
    ["size", "san01/pool=vdi/read_iops"],
    ["patterns", "san01/pool=vdi/read_iops"],
    ["trend", "san01/pool=vdi/read_iops"],
    ["compare", "san01/pool=vdi/read_iops", "--before", "2026-W11", "--after", "2026-W12"],
    ["changes", "--period", "2026-W12"],
])
def test_cli_refuses_a_plot_file_it_cannot_write_before_any_work(demo_home: Path, tmp_path: Path,
                                                                args: list[str]) -> None:
    result = run("--home", str(demo_home), *args, "--plot", str(tmp_path / "out.jpg"))
    assert result.exit_code == 1
    assert result.stderr == f"Error: cannot write a plot to '{tmp_path / 'out.jpg'}': the file name must end in .png or .svg\n"


def test_cli_plot_does_not_go_with_pairs(demo_home: Path, tmp_path: Path) -> None:
    result = run("--home", str(demo_home), "correlate", "--pairs", "--against", "san01/*", "--plot", str(tmp_path / "p.png"))
    assert result.exit_code == 2 and "does not go with --pairs" in result.stderr


def test_cli_import_does_not_load_matplotlib() -> None:
    import subprocess
    import sys
    code = "import sys, warehouse.cli; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
    assert math.isclose(plot.WIDTH_IN * 2.54, 18.288)     # fits the 21 cm of A4 with margins
