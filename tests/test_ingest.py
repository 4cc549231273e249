"""Ingest of every layout: exact values, quarantine accounting, idempotency, DST, rates."""
from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pytest

from warehouse.home import open_warehouse
from warehouse.ingest.run import IngestOptions, ingest_files

DATA = Path(__file__).parent / "data" / "ingest"


def utc(text: str) -> datetime:
    """Naive UTC, as `ts AT TIME ZONE 'UTC'` returns it."""
    return datetime.fromisoformat(text)


def load(home: Path, name: str, **opts: object):
    (result,) = ingest_files(home, [DATA / name], IngestOptions(**opts))
    assert result.status == "loaded", result.message
    assert result.rows_read == result.rows_loaded + result.rows_quarantined
    return result


def samples(home: Path, where: str = "true") -> list[tuple]:
    with open_warehouse(home) as wh:
        return wh.con.execute(
            f"SELECT key, ts AT TIME ZONE 'UTC', value FROM samples WHERE {where} ORDER BY key, ts").fetchall()


def quarantine(home: Path) -> list[tuple]:
    with open_warehouse(home) as wh:
        return wh.con.execute("SELECT line, column_name, raw, reason FROM quarantine ORDER BY line").fetchall()


def test_wide_values_and_quarantine(home: Path) -> None:
    r = load(home, "wide.csv", host="h1", source="lab")
    assert (r.layout, r.rows_read, r.rows_loaded, r.rows_quarantined, r.cells_quarantined) == ("wide", 6, 3, 3, 1)
    assert r.values_loaded == 7 and r.duplicates == 1
    got = samples(home)
    assert [(k, v) for k, _, v in got if k == "h1/cpu_util"] == [("h1/cpu_util", 12.5), ("h1/cpu_util", 13.5), ("h1/cpu_util", 15.5)]
    assert [v for k, _, v in got if k == "h1/queue"] == [1.0, 2.0, 4.0]
    assert [t for k, t, _ in got if k == "h1/disk_read_latency"] == [utc("2026-03-02 08:00:00")]
    lines = quarantine(home)
    assert [q[0] for q in lines] == [3, 4, 5, 7]
    assert lines[0][1:3] == ("disk_read_latency (ms)", "n/a")
    assert "fields" in lines[1][3] and lines[1][2] == "2026-03-02T08:00:30Z,14.5,3.3"
    assert lines[2][2] == "not a time" and "timestamp" in lines[2][3]
    assert "duplicate" in lines[3][3]
    with open_warehouse(home) as wh:
        units = dict(wh.con.execute("SELECT counter, unit FROM counters").fetchall())
    assert units == {"cpu_util": "%", "disk_read_latency": "ms", "queue": ""}


def test_counter_paths_dst_in_local_time(home: Path) -> None:
    """Local times in Europe/Berlin: the spring gap and the autumn repeat are quarantined, never shifted."""
    r = load(home, "counterpaths.csv")
    assert (r.layout, r.rows_read, r.rows_loaded, r.rows_quarantined) == ("counter-paths", 5, 3, 2)
    assert r.values_loaded == 8
    cpu = samples(home, "counter = '% Processor Time'")
    assert [(t, v) for _, t, v in cpu] == [(utc("2026-03-29 00:59:45"), 10.0), (utc("2026-10-25 02:30:00"), 13.0)]
    reasons = [q[3] for q in quarantine(home)]
    assert reasons == ["non-existent local time (DST spring-forward gap)", "ambiguous local time (DST fall-back)"]
    assert [q[0] for q in quarantine(home)] == [3, 5]
    with open_warehouse(home) as wh:
        rows = wh.con.execute("SELECT host, object, instance, counter, unit FROM counters ORDER BY object").fetchall()
    assert ("vdi-hv01", "Network Interface", "eth0 (vlan 12)", "Bytes Total/sec", "B/s") in rows
    assert ("vdi-hv01", "PhysicalDisk", "0 C:", "Avg. Disk sec/Transfer", "s") in rows
    assert ("vdi-hv01", "Processor", "_Total", "% Processor Time", "%") in rows


def test_long_any_order_tags_and_duplicates(home: Path) -> None:
    r = load(home, "long.csv")
    assert (r.layout, r.rows_read, r.rows_loaded, r.rows_quarantined, r.duplicates) == ("long", 6, 4, 2, 1)
    got = samples(home, "key LIKE '%pool=gold%' AND counter LIKE 'read_latency%'")
    assert [(t, v) for _, t, v in got] == [(utc("2026-03-02 08:00:00"), 4.5), (utc("2026-03-02 08:01:00"), 4.25)]
    silver = samples(home, "key LIKE '%pool=silver%'")
    assert [v for *_, v in silver] == [9.9]
    reasons = [q[3] for q in quarantine(home)]
    assert reasons[0].startswith("duplicate sample") and reasons[1] == "missing value"
    assert [q[0] for q in quarantine(home)] == [6, 7]


def test_activity_sections(home: Path) -> None:
    r = load(home, "activity.csv")
    assert (r.layout, r.rows_read, r.rows_loaded, r.rows_quarantined, r.values_loaded) == ("activity", 6, 5, 1, 20)
    with open_warehouse(home) as wh:
        got = wh.con.execute("SELECT object, instance, counter, unit, value FROM samples"
                             " WHERE ts = TIMESTAMPTZ '2026-03-02 08:01:00+00' AND counter IN ('%user', 'await')"
                             " ORDER BY object, instance").fetchall()
    assert got == [("cpu", "-1", "%user", "%", 12.0), ("cpu", "0", "%user", "%", 14.0), ("dev", "sda", "await", "", 1.25)]
    assert quarantine(home)[0][0] == 5


def test_european_decimal_comma_and_cumulative_rates(home: Path) -> None:
    """Decimal comma, DD.MM.YYYY local times; an octet total becomes a rate, a 32-bit wrap corrected, a reset a gap."""
    r = load(home, "european.csv", host="core-sw01")
    assert (r.rows_read, r.rows_loaded, r.wraps, r.resets) == (5, 5, 1, 1)
    cpu = samples(home, "counter = 'CPU Last'")
    assert [(t, v) for _, t, v in cpu][0] == (utc("2026-03-02 07:00:00"), 12.5)
    rate = samples(home, "counter = 'Port1_in_octets'")
    assert [(t, round(v, 9)) for _, t, v in rate] == [
        (utc("2026-03-02 07:00:10"), 59.6), (utc("2026-03-02 07:00:20"), 100.0), (utc("2026-03-02 07:00:40"), 100.0)]
    with open_warehouse(home) as wh:
        assert wh.con.execute("SELECT kind, unit FROM counters WHERE counter = 'Port1_in_octets'").fetchone() == ("rate", "/s")


@pytest.mark.parametrize("name", ["utf16.csv", "cp1252.csv"])
def test_encodings(home: Path, name: str) -> None:
    r = load(home, name, host="h")
    with open_warehouse(home) as wh:
        rows = wh.con.execute("SELECT counter, unit, value FROM samples ORDER BY ts").fetchall()
    assert rows[0] == ("Latenz", "µs", 1.5)
    assert r.values_loaded == len(rows)


def test_same_content_is_skipped_and_replace_reloads(home: Path) -> None:
    load(home, "wide.csv", host="h1")
    (again,) = ingest_files(home, [DATA / "wide.csv"], IngestOptions(host="h1"))
    assert again.status == "skipped" and "already loaded" in again.message
    (replaced,) = ingest_files(home, [DATA / "wide.csv"], IngestOptions(host="h1", replace=True))
    assert replaced.status == "loaded"
    assert len(samples(home)) == 7
    assert len(quarantine(home)) == 4
    with open_warehouse(home) as wh:
        assert wh.con.execute("SELECT count(*) FROM ingests").fetchone()[0] == 1
        files = wh.con.execute("SELECT count(*) FROM ingest_files").fetchone()[0]
    assert len(list((home / "points").rglob("*.parquet"))) == files


def test_bad_files_fail_alone(home: Path, tmp_path: Path) -> None:
    empty = tmp_path / "empty.csv"
    empty.write_bytes(b"")
    binary = tmp_path / "blob.csv"
    binary.write_bytes(bytes(range(256)) * 40)
    notime = tmp_path / "notime.csv"
    notime.write_text("a,b\n1,2\n")
    results = ingest_files(home, [empty, binary, tmp_path / "missing.csv", notime, DATA / "wide.csv"],
                           IngestOptions(host="h1"))
    assert [r.status for r in results] == ["failed", "failed", "failed", "failed", "loaded"]
    assert results[0].message.startswith(str(empty)) and "empty" in results[0].message
    assert "binary" in results[1].message
    assert "missing.csv" in results[2].message
    assert "timestamp" in results[3].message and ":1" in results[3].message


def test_hostile_names_stay_inside_home(home: Path, tmp_path: Path) -> None:
    hostile = tmp_path / "hostile.csv"
    hostile.write_text(
        "host,time,metric,value\n"
        '"../../x",2026-03-02T08:00:00Z,cpu,1\n'
        '"a/../../b",2026-03-02T08:00:00Z,cpu,2\n'
        '"..\\..\\x",2026-03-02T08:00:00Z,cpu,3\n'
        '"q\'""; DROP TABLE counters; --",2026-03-02T08:00:00Z,cpu,4\n')
    before = {p for p in tmp_path.parent.rglob("*") if home not in p.parents}
    (r,) = ingest_files(home, [hostile], IngestOptions(source="../../evil/'src"))
    assert r.status == "loaded" and r.values_loaded == 4
    after = {p for p in tmp_path.parent.rglob("*") if home not in p.parents}
    assert after == before
    for part in (home / "points").rglob("*"):
        assert part.resolve().is_relative_to(home.resolve())
        assert ".." not in part.relative_to(home).parts
    with open_warehouse(home) as wh:
        hosts = sorted(r[0] for r in wh.con.execute("SELECT host FROM samples").fetchall())
    assert hosts == sorted(["../../x", "a/../../b", "..\\..\\x", "q'\"; DROP TABLE counters; --"])
