"""The demo generator: deterministic, in the promised layouts, with recoverable planted phenomena.

Everything here reads the written files with plain numpy/pandas, never with the warehouse.
"""
from __future__ import annotations

import hashlib
import io
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from seed import generate as g

SMALL = g.SCALES["small"]
SCENARIO_MD = Path(__file__).resolve().parents[1] / "seed" / "SCENARIO.md"


@pytest.fixture(scope="module")
def small(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, g.Report]:
    out = tmp_path_factory.mktemp("small")
    return out, g.generate_report(out, scale="small")


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _text(path: Path) -> str:
    raw = path.read_bytes()
    if raw.startswith(b"\xff\xfe"):
        return raw[2:].decode("utf-16-le")
    if raw.startswith(b"\xef\xbb\xbf"):
        return raw[3:].decode("utf-8")
    if path.parent.name == g.SWITCH:
        return raw.decode("cp1252")
    return raw.decode("utf-8")


def _lines(path: Path) -> list[str]:
    return _text(path).splitlines()


def _files(out: Path, machine: str) -> list[Path]:
    return sorted((out / machine).glob("*.csv"))


# ------------------------------------------------------------------------------- determinism


def test_same_arguments_give_byte_identical_files(small: tuple[Path, g.Report],
                                                  tmp_path: Path) -> None:
    out, report = small
    again = g.generate(tmp_path, scale="small")
    first = [f.path for f in report.files]
    assert [p.relative_to(tmp_path) for p in again] == [p.relative_to(out) for p in first]
    assert again == sorted(again)
    assert [_sha(p) for p in again] == [_sha(p) for p in first]


def test_small_scale_is_small(small: tuple[Path, g.Report]) -> None:
    _, report = small
    assert len(report.files) == 3 * 4 + 4 + 28 + 4
    assert 3_000_000 < report.values <= 4_000_000
    assert report.bytes < 80_000_000


# ------------------------------------------------------------------------------- layouts


def test_hypervisor_files_are_counter_paths(small: tuple[Path, g.Report]) -> None:
    out, _ = small
    for host in g.HV_HOSTS:
        files = _files(out, host)
        assert [p.name for p in files] == [f"{host}_{d}.csv" for d in
                                           ("20260302", "20260309", "20260316", "20260323")]
        raw = files[0].read_bytes()
        assert raw.startswith(b"\xff\xfe" if host == g.HV_UTF16_HOST else b"\xef\xbb\xbf")
        lines = _lines(files[0])
        assert lines[0].startswith('"(LOGGER-CSV 4.0) (W. Europe Standard Time)(-60)",')
        assert f'"\\\\{host}\\Processor(_Total)\\% Processor Time"' in lines[0]
        assert f'"\\\\{host}\\PhysicalDisk(0 C:)\\Avg. Disk sec/Transfer"' in lines[0]
        assert f'"\\\\{host}\\Process(scanagent)\\% Processor Time"' in lines[0]
        assert re.fullmatch(r'"03/02/2026 00:00:00\.\d{3}"(,"[^"]*")+', lines[1])
        assert '," ",' in lines[1]            # rate counters are blank in a run's first row
        assert b"\r\n" in raw[:4000] or b"\r\x00\n\x00" in raw[:4000]


def test_array_file_is_long_with_iso_utc(small: tuple[Path, g.Report]) -> None:
    out, _ = small
    lines = _lines(_files(out, g.ARRAY)[0])
    assert lines[0] == "metric,ts,value,device,pool"
    assert lines[1].startswith("read_iops,2026-03-01T23:00:00Z,")
    assert lines[1].endswith(",san01,vdi")


def test_file_server_is_activity_with_two_sections(small: tuple[Path, g.Report]) -> None:
    out, _ = small
    files = _files(out, g.FILE_SERVER)
    assert len(files) == 28
    lines = _lines(files[0])
    assert lines[0] == "# hostname;interval;timestamp;CPU;%user;%system;%iowait;%idle"
    assert lines.count("# hostname;interval;timestamp;DEV;tps;rkB/s;wkB/s;await;%util") == 1
    assert lines[1].startswith("fs01;60;2026-03-01 23:00:00 UTC;-1;")


def test_switch_file_is_european(small: tuple[Path, g.Report]) -> None:
    out, _ = small
    path = _files(out, g.SWITCH)[0]
    with pytest.raises(UnicodeDecodeError):
        path.read_bytes().decode("utf-8")     # cp1252 degree sign
    lines = _lines(path)
    assert lines[0].startswith("Zeit;cpu_load (%);temperature (°C);port1_in_octets;")
    assert re.fullmatch(r"02\.03\.2026 00:00:00;\d+,\d;\d+,\d(;\d+)+", lines[1])


# ------------------------------------------------------------------------------- phenomena


@pytest.fixture(scope="module")
def array(small: tuple[Path, g.Report]) -> dict[str, pd.DataFrame]:
    """The storage array's samples, one time-indexed frame (columns = metrics) per pool."""
    out, _ = small
    df = pd.concat([pd.read_csv(p, on_bad_lines="skip", engine="pyarrow") for p in _files(out, g.ARRAY)])
    df["value"] = pd.to_numeric(df["value"], errors="coerce")
    frames = {}
    for pool, part in df.groupby("pool"):
        wide = part.pivot(index="ts", columns="metric", values="value")
        wide.index = pd.to_datetime(wide.index, utc=True)
        frames[str(pool)] = wide.sort_index().interpolate()
    return frames


def _high_pass(x: np.ndarray, width: int = 31) -> np.ndarray:
    kernel = np.ones(width) / width
    y = x - np.convolve(np.pad(x, width // 2, mode="edge"), kernel, mode="valid")
    return (y - y.mean()) / y.std()


def test_queue_depth_leads_read_latency_by_two_samples(array: dict[str, pd.DataFrame]) -> None:
    wide = array[g.LEAD_POOL]
    q = _high_pass(wide["queue_depth"].to_numpy())
    r = _high_pass(wide["read_latency_ms"].to_numpy())
    lags = range(-5, 6)
    corr = [np.mean(q[: q.size - k] * r[k:]) if k >= 0 else np.mean(q[-k:] * r[:k]) for k in lags]
    assert list(lags)[int(np.argmax(corr))] == g.LEAD_SAMPLES == 2
    assert max(corr) > 0.6


def test_destage_period_is_the_periodogram_peak(array: dict[str, pd.DataFrame]) -> None:
    w = array["vdi"]["write_latency_ms"].to_numpy()
    power = np.abs(np.fft.rfft(w - w.mean())) ** 2
    freq = np.fft.rfftfreq(w.size, d=SMALL.interval_s)
    band = (freq > 1 / 3600) & (freq < 1 / 180)
    peak_s = 1 / freq[band][np.argmax(power[band])]
    assert abs(peak_s - g.DESTAGE_PERIOD_S) < 2
    assert g.DESTAGE_PERIOD_S % 900 and 3600 % g.DESTAGE_PERIOD_S


def test_level_shift_on_the_vdi_pool(array: dict[str, pd.DataFrame]) -> None:
    wide = array[g.SHIFT_POOL]
    local = wide.index.tz_convert(g.TZ)
    working = (local.day_of_week.isin([0, 2, 3, 4])) & (local.hour >= 10) & (local.hour < 16)
    after = local >= pd.Timestamp(g.SHIFT_AT_LOCAL, tz=g.TZ)
    ratio = (wide["read_iops"][working & after].median()
             / wide["read_iops"][working & ~after].median())
    assert ratio == pytest.approx(g.SHIFT_FACTOR, abs=0.03)


def _read_host(out: Path, host: str) -> pd.DataFrame:
    frames = []
    for path in _files(out, host):
        df = pd.read_csv(io.StringIO(_text(path)), na_values=[" "])
        when = pd.to_datetime(df.iloc[:, 0], format="%m/%d/%Y %H:%M:%S.%f", errors="coerce")
        df.index = when.dt.floor("s").dt.tz_localize(g.TZ, nonexistent="NaT", ambiguous="NaT")
        frames.append(df[df.index.notna()].iloc[:, 1:])
    df = pd.concat(frames)
    df.columns = [c.split("\\", 3)[3] for c in df.columns]
    return df


def test_rhythm_busiest_day_scan_gap_and_constants(small: tuple[Path, g.Report]) -> None:
    out, _ = small
    hv02 = _read_host(out, g.SCAN_HOST)
    cpu = hv02["Processor(_Total)\\% Processor Time"]
    local = cpu.index
    weekday, minute = local.day_of_week, local.hour * 60 + local.minute
    scan = (weekday == g.SCAN_WEEKDAY) & (minute >= 13 * 60) & (minute < 13 * 60 + 40)
    proc = hv02[f"Process({g.SCAN_PROCESS})\\% Processor Time"]
    assert proc[scan].median() == pytest.approx(g.SCAN_PROCESS_PCT, rel=0.05)
    assert proc[~scan].max() < 10
    near = (weekday == g.SCAN_WEEKDAY) & (minute >= 12 * 60 + 10) & (minute < 13 * 60 - 10)
    assert cpu[scan].mean() - cpu[near].mean() == pytest.approx(g.SCAN_HOST_CPU_PP, abs=2)
    working = (minute >= 10 * 60) & (minute < 16 * 60) & ~scan
    by_day = cpu[working].groupby(weekday[working]).mean() - g.CPU_FLOOR_PCT
    assert by_day.idxmax() == g.BUSIEST_WEEKDAY
    others = by_day[[0, 2, 3, 4]].mean()
    assert by_day[g.BUSIEST_WEEKDAY] / others == pytest.approx(g.BUSIEST_FACTOR, abs=0.03)
    assert by_day[[5, 6]].mean() / others == pytest.approx(g.WEEKEND_LEVEL, abs=0.02)
    weekdays = cpu[(weekday < 5) & ~scan]
    by_ten = weekdays.groupby(weekdays.index.hour * 6 + weekdays.index.minute // 10).mean()
    assert by_ten.idxmax() == 8 * 6 + 1                       # 08:10-08:20, the log-on surge
    assert (hv02["Memory\\Total MBytes"] == g.HOST_MEMORY_MB).all()
    assert (hv02["Network Interface(vmnic0)\\Packets Received Errors"] == 0).all()
    hv03 = _read_host(out, g.GAP_HOST)
    start, end = (pd.Timestamp(t, tz=g.TZ) for t in (g.GAP_START_LOCAL, g.GAP_END_LOCAL))
    assert not ((hv03.index >= start) & (hv03.index < end)).any()
    assert hv03.index[hv03.index >= end][0] == end
    assert hv03.index[hv03.index < start][-1] == start - pd.Timedelta(seconds=SMALL.interval_s)


def test_switch_counters_wrap_once_and_reset_once(small: tuple[Path, g.Report]) -> None:
    out, _ = small
    frames = [pd.read_csv(io.StringIO(_text(p)), sep=";", decimal=",", na_values=["n/a"])
              for p in _files(out, g.SWITCH)]
    df = pd.concat(frames)
    df.index = pd.to_datetime(df.pop("Zeit"), format="%d.%m.%Y %H:%M:%S")
    octets = df.filter(like="_octets")
    assert octets.max().max() < g.COUNTER_MODULUS
    drops = octets.diff() < 0
    wrap = pd.Timestamp(g.WRAP_AT_LOCAL)
    up = pd.Timestamp(g.RESTART_UP_LOCAL)
    assert list(drops.index[drops[g.WRAP_COUNTER]]) == [wrap, up]
    for name in octets.columns.drop(g.WRAP_COUNTER):
        assert list(drops.index[drops[name]]) == [up]
    down = pd.Timestamp(g.RESTART_DOWN_LOCAL)
    assert not ((df.index >= down) & (df.index < up)).any()
    assert (octets[octets.index < down].iloc[-1] < 2 ** 31).all()   # a reset, not a wrap


# ------------------------------------------------------------------------------- malformed rows


def test_malformed_rows_are_exactly_as_listed(small: tuple[Path, g.Report]) -> None:
    out, _ = small
    assert len(g.MALFORMED) == 7
    for m in g.MALFORMED:
        lines = _lines(out / m.file)
        marker = m.fill(m.marker, SMALL.interval_s)
        hits = [i + 1 for i, line in enumerate(lines) if line.startswith(marker)]
        assert hits == [m.line_small], m.key
        bad = lines[m.line_small - 1]
        if m.action == "replace-line":
            assert bad == m.fill(m.text, SMALL.interval_s)
        if m.action == "replace-cell":
            sep = "," if m.file.startswith("vdi-") else ";"
            cell = bad.split(sep)[m.column]
            assert cell.strip('"') == m.text


def test_no_other_bad_rows(small: tuple[Path, g.Report]) -> None:
    """Field counts match the headers except on the listed lines; no other bad cells or times."""
    out, report = small
    for f in report.files:
        rel = f.path.relative_to(out).as_posix()
        listed = [m for m in g.MALFORMED if m.file == rel]
        sep = "," if f.layout in ("counter-paths", "long") else ";"
        text = _text(f.path)
        for section in re.split(r"\n(?=#)", text.rstrip("\n")):
            fields = section[: section.index("\n")].count(sep)
            short = sum(fields - m.fill(m.text, SMALL.interval_s).count(sep) for m in listed
                        if m.action == "replace-line" and m.fill(m.marker, SMALL.interval_s) in section)
            assert section.count(sep) == fields * (section.count("\n") + 1) - short, rel
        assert text.count("n/a") + text.count("ERR") == sum(m.key in ("n/a-cell", "n/a-eu", "bad-value")
                                                        for m in listed), rel
        if f.layout == "counter-paths":
            assert text.count('\n"03/29/2026 02:') == sum(m.key == "dst-gap-time" for m in listed), rel
            assert sum(text.count(f" {h}:") for h in range(24, 30)) == sum(
                m.key == "bad-timestamp" for m in listed), rel


def test_scenario_md_lists_the_parameters() -> None:
    text = SCENARIO_MD.read_text(encoding="utf-8")
    for needle in ("660 s", "120 s", "4.0 ms", "2 samples", "1.30", "1.25", "0.10", "08:15",
                   g.SHIFT_AT_LOCAL, g.GAP_START_LOCAL, g.GAP_END_LOCAL, g.WRAP_AT_LOCAL,
                   g.RESTART_DOWN_LOCAL, g.RESTART_UP_LOCAL, "13:00", "960", "786432"):
        assert needle in text, needle
    for m in g.MALFORMED:
        assert m.file in text and str(m.line_small) in text, m.key
