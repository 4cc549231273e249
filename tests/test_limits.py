"""`warehouse limits`: levels from limits.toml and the shipped defaults, time and runs beyond them."""
from __future__ import annotations

import json
import re
import tomllib
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from seed import generate as seed
from warehouse.cli import cli
from warehouse.errors import WarehouseError
from warehouse.home import open_warehouse
from warehouse.ingest.run import IngestOptions, ingest_files
from warehouse.limits import DEFAULTS, check_limits, load_rules, measure


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def test_every_default_level_is_marked_common_practice() -> None:
    """Only common practice ships: every warn and critical line of the default set says so."""
    levels = [line for line in DEFAULTS.splitlines() if re.match(r"\s*(warn|critical)\s*=", line)]
    assert levels and all("common practice" in line for line in levels)
    entries = tomllib.loads(DEFAULTS)["limit"]
    disk = next(e for e in entries if "*read_latency*" in e["counters"])
    assert (disk["warn"], disk["critical"], disk["unit"]) == (15, 25, "ms")   # common practice, no single source


def test_measure_time_share_and_longest_run_by_hand() -> None:
    """Ten samples a minute apart, a gap of five minutes after the sixth: a stretch beyond the level
    that meets the gap ends there; each sample counts one interval (60 s). Worked by hand."""
    ts = (np.array([0, 1, 2, 3, 4, 5, 10, 11, 12, 13]) * 60 * 10**6).astype(np.int64)
    v = np.array([1, 6, 7, 8, 2, 9, 9, 9, 9, 9], dtype=float)
    m = measure(ts, v, 5.0, 8.5, "above", "UTC")
    assert m["warn_share"] == 0.8 and m["warn_seconds"] == 8 * 60
    assert m["longest_warn_seconds"] == 4 * 60                 # 10..13 min; 1..3 min is 3, 5 min is cut by the gap
    assert m["longest_warn_start"] == datetime(1970, 1, 1, 0, 10, tzinfo=timezone.utc)
    assert m["critical_share"] == 0.5 and m["longest_critical_seconds"] == 4 * 60
    low = measure(ts, v, 2.0, 1.5, "below", "UTC")
    assert low["warn_share"] == 0.1 and low["critical_share"] == 0.1 and low["peak"] == 1.0


def test_demo_destage_peaks_found(demo_home: Path, tmp_path: Path) -> None:
    """Planted (SCENARIO #3): write latency + 4 ms for 120 s every 660 s on every pool. With the
    office's own levels (SCENARIO "Service levels": warn 3 ms, critical 4.5 ms, the file `warehouse
    demo` writes), 2 of every 11 one-minute samples are beyond warn, the longest stretch is 2
    minutes, and it starts on a destage pulse. The default 15 ms level (common practice) is never
    reached."""
    levels = tmp_path / "limits.toml"
    levels.write_text(seed.SERVICE_LEVELS_TOML)
    with open_warehouse(demo_home) as wh:
        r = check_limits(wh, "2026-W11", limits_file=levels)
    first = datetime.fromisoformat(seed.DESTAGE_FIRST_UTC.replace("Z", "+00:00"))
    rows = {x["key"]: x for x in r["results"]}
    for pool in ("vdi", "files"):
        x = rows[f"san01/pool={pool}/write_latency_ms"]
        assert x["source"] == str(levels) and x["warn_share"] == pytest.approx(2 / 11, abs=0.002)
        assert x["longest_warn_seconds"] == seed.DESTAGE_DURATION_S
        offset = (x["longest_warn_start"] - first).total_seconds()
        assert offset % seed.DESTAGE_PERIOD_S == 0
    others = [x for x in r["results"] if x["source"] == "defaults"]
    assert others and all(x["warn_share"] == 0 for x in others)
    seconds = next(x for x in others if x["unit"] == "s")
    assert seconds["warn"] == pytest.approx(0.015)             # 15 ms converted to a counter in seconds


def test_user_file_overrides_and_can_drop_defaults(home: Path, tmp_path: Path) -> None:
    csv = tmp_path / "lat.csv"
    stamps = [f"2026-03-02T{h:02d}:{m:02d}:00Z" for h in range(2) for m in range(60)]
    values = [30.0 if 20 <= i < 30 else 5.0 for i in range(len(stamps))]
    csv.write_text("time,disk_read_latency_ms,cpu_util\n" + "".join(f"{t},{v},50\n" for t, v in zip(stamps, values)))
    ingest_files(home, [csv], IngestOptions(host="db1"))
    with open_warehouse(home) as wh:
        default = {x["key"]: x for x in check_limits(wh)["results"]}
    assert default["db1/disk_read_latency_ms"]["critical_share"] == pytest.approx(10 / 120)
    assert default["db1/disk_read_latency_ms"]["longest_critical_seconds"] == 600
    (home / "limits.toml").write_text('include_defaults = false\n[[limit]]\ncounters = ["*latency*"]\n'
                                      'warn = 40\ncritical = 50\n')
    with open_warehouse(home) as wh:
        mine = check_limits(wh)
    assert [x["key"] for x in mine["results"]] == ["db1/disk_read_latency_ms"]
    assert mine["results"][0]["warn_share"] == 0 and mine["files"] == [str(home / "limits.toml")]
    out = run("--home", str(home), "limits", "--format", "json")
    assert out.exit_code == 0 and json.loads(out.output)["results"][0]["warn"] == 40


@pytest.mark.parametrize("text,message", [
    ("[[limit]\n", "cannot read TOML"),
    ('[[limit]]\ncounters = "*"\nwarn = "high"\ncritical = 3\n', "limit entry 1: warn must be a number"),
    ('[[limit]]\ncounters = "*"\nwarn = 5\ncritical = 3\n', "critical (3) must be beyond warn (5)"),
    ('[[limit]]\ncounters = "*"\nwarn = 5\ncritical = 9\nlevel = 1\n', "unknown key 'level'"),
    ('[[limit]]\nwarn = 5\ncritical = 9\n', "counters must be a glob"),
    ('[[limit]]\ncounters = "*"\nwarn = 5\ncritical = 3\ndirection = "down"\n', "direction must be"),
])
def test_bad_limits_file_is_one_line(home: Path, text: str, message: str) -> None:
    (home / "limits.toml").write_text(text)
    with pytest.raises(WarehouseError, match=re.escape(message)):
        load_rules(home)
    out = run("--home", str(home), "limits")
    assert out.exit_code == 1 and out.stderr.count("\n") == 1 and "limits.toml" in out.stderr


def test_limits_table_fits_and_names_missing_file(demo_home: Path, tmp_path: Path) -> None:
    out = run("--home", str(demo_home), "limits", "--period", "2026-W12")
    assert out.exit_code == 0 and max(len(line) for line in out.output.splitlines()) <= 100
    missing = run("--home", str(demo_home), "limits", "--file", str(tmp_path / "none.toml"))
    assert missing.exit_code == 1 and "no such limits file" in missing.stderr
