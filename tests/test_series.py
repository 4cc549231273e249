"""The aligned reader (warehouse/series.py) against the same bucket means computed by DuckDB.

The reference is a plain GROUP BY over the `points` view: avg(value) per (counter, bucket). The
reader does not run that query (it reduces the raw Parquet columns in NumPy), so agreement here is
a check of two independent computations of the same thing.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from warehouse import series
from warehouse.errors import WarehouseError
from warehouse.home import open_warehouse
from warehouse.ingest import write
from warehouse.ingest.run import IngestOptions, ingest_files

US = 1_000_000


def reference(wh, ids: list[int], grid: series.Grid) -> np.ndarray:
    rows = wh.con.execute(
        """SELECT counter_id, (epoch_us(ts) - $g0) // $b AS k, avg(value) FROM points
           WHERE counter_id IN (SELECT unnest($ids::INTEGER[]))
             AND ts >= make_timestamptz($a) AND ts < make_timestamptz($z) GROUP BY ALL""",
        {"ids": ids, "g0": grid.start_us, "b": grid.bucket_us, "a": grid.start_us, "z": grid.end_us}).fetchall()
    out = np.full((grid.n, len(ids)), np.nan)
    where = {cid: i for i, cid in enumerate(ids)}
    for cid, k, v in rows:
        out[k, where[cid]] = v
    return out


def assert_same(got: np.ndarray, want: np.ndarray) -> None:
    assert got.shape == want.shape
    assert np.array_equal(np.isnan(got), np.isnan(want))
    present = ~np.isnan(want)
    np.testing.assert_allclose(got[present], want[present], rtol=1e-12, atol=0)


def sql_range(wh, ids: list[int], a: int | None, b: int | None) -> tuple[int, int] | None:
    lo, hi = wh.con.execute(
        "SELECT epoch_us(min(ts)), epoch_us(max(ts)) FROM points WHERE counter_id IN (SELECT unnest($ids::INTEGER[]))"
        " AND ts >= make_timestamptz($a) AND ts < make_timestamptz($b)",
        {"ids": ids, "a": -(2**62) if a is None else a, "b": 2**62 if b is None else b}).fetchone()
    return None if lo is None else (lo if a is None else a, hi + 1 if b is None else b)


def check_ranges(wh, ids: list[int]) -> None:
    """time_range (row-group statistics, reading only shared row groups) equals min/max in SQL."""
    lo, hi = sql_range(wh, ids, None, None)
    assert series.time_range(wh, ids, None, None) == (lo, hi)
    for a, b in [(lo + 3_600 * US + 1, None), (None, hi - 7_200 * US), (lo + 60 * US, lo + 86_400 * US)]:
        assert series.time_range(wh, ids, a, b) == sql_range(wh, ids, a, b)
        assert series._data_range(series._Files(wh), ids, -(2**62) if a is None else a,
                                  2**62 if b is None else b)[0] is not None


def all_ids(wh) -> list[int]:
    return [r[0] for r in wh.con.execute("SELECT counter_id FROM counters ORDER BY key").fetchall()]


@pytest.mark.parametrize("bucket,trim_start_s,trim_end_s", [(60, 0, 0), (300, 7 * 3600 + 17, 86_400), (3600, 0, 20 * 86_400)])
def test_bucket_means_equal_sql_on_demo(demo_home: Path, bucket: int, trim_start_s: int, trim_end_s: int) -> None:
    with open_warehouse(demo_home) as wh:
        ids = all_ids(wh)  # key order, not id order: columns must follow the order asked for
        lo, hi = series.time_range(wh, ids, None, None)
        grid = series.grid_for(lo + trim_start_s * US, hi - trim_end_s * US, bucket)
        assert_same(series.bucket_block(wh, ids, grid), reference(wh, ids, grid))
        scattered = ids[::3][::-1]
        assert_same(series.bucket_block(wh, scattered, grid), reference(wh, scattered, grid))
        if bucket == 60:
            for sel in (ids, scattered, ids[5:6], ids[-40:]):
                check_ranges(wh, sel)


def test_blocks_and_combine_follow_the_reference(demo_home: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    with open_warehouse(demo_home) as wh:
        ids = all_ids(wh)
        lo, hi = series.time_range(wh, ids, None, None)
        grid = series.grid_for(lo, hi, 600)
        order = sorted(ids)                   # blocks come in increasing counter id
        want = reference(wh, order, grid)
        reads: list[tuple[str, int]] = []
        reduce_file = series._reduce_file

        def counted(path, meta, groups, *rest):
            reads.extend((str(path), g) for g in groups)
            return reduce_file(path, meta, groups, *rest)

        monkeypatch.setattr(series, "_reduce_file", counted)
        # window: every row group read once, the columns of later blocks carried;
        # runs (a window too large): no carry, row groups shared by two blocks read by both
        for threads, size, window in ((1, 7, series.WINDOW_CELLS), (2, 7, series.WINDOW_CELLS), (2, 1, 1),
                                      (2, None, series.WINDOW_CELLS), (1, 3, 1)):
            monkeypatch.setattr(series, "READ_THREADS", threads)
            monkeypatch.setattr(series, "WINDOW_CELLS", window)
            reads.clear()
            parts = list(series.blocks(wh, ids, grid, size=size))
            assert [c for part, _ in parts for c in part] == order
            assert all(b.shape == (grid.n, len(part)) and b.flags.f_contiguous for part, b in parts)
            assert_same(np.concatenate([b for _, b in parts], axis=1), want)
            if window > 1:
                assert len(reads) == len(set(reads))
            else:
                assert len(reads) > len(set(reads))
        same_unit = [r[0] for r in wh.con.execute(
            "SELECT counter_id FROM counters WHERE counter = 'write_iops' ORDER BY key").fetchall()]
        assert len(same_unit) >= 2
        part = reference(wh, same_unit, grid)
        combined = series.combine(wh, same_unit, grid, "sum")
        np.testing.assert_allclose(combined.values, np.nansum(part, axis=1) * np.where(
            np.isnan(part).all(axis=1), np.nan, 1), rtol=1e-12)
        assert np.array_equal(combined.present, (~np.isnan(part)).sum(axis=1))


def _csv(path: Path, start: int, rows: int, scale: float) -> Path:
    lines = ["time,a,b,c"]
    for i in range(start, start + rows):
        t = f"2026-05-04T{i // 60 % 24:02d}:{i % 60:02d}:00Z"
        lines.append(f"{t},{i * scale},{(i % 7) * scale},{-i * scale}")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_duplicates_across_files_small_row_groups_and_unsorted_files(
        home: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # Small row groups so the row-group statistics have something to prune.
    monkeypatch.setattr(write, "ROW_GROUP", 16)
    first = _csv(tmp_path / "one.csv", 0, 300, 1.0)
    second = _csv(tmp_path / "two.csv", 250, 200, 2.0)  # 50 minutes overlap with other values
    for f in (first, second):
        (res,) = ingest_files(home, [f], IngestOptions(host="h1"))
        assert res.status == "loaded"
    with open_warehouse(home) as wh:
        ids = all_ids(wh)
        lo, hi = series.time_range(wh, ids, None, None)
        grid = series.grid_for(lo, hi, 300)
        assert_same(series.bucket_block(wh, ids, grid), reference(wh, ids, grid))
        for sel in (ids, ids[1:2], ids[::2]):
            check_ranges(wh, sel)
        with pytest.raises(WarehouseError, match="no samples"):
            series.time_range(wh, ids, hi + 3_600 * US, None)
        with pytest.raises(WarehouseError, match="no samples"):  # between two samples, inside row groups
            series.time_range(wh, ids, lo + 30 * US, lo + 31 * US)
        # the overlap holds both files' samples, as the points view does
        assert wh.con.execute("SELECT count(*) FROM points").fetchone()[0] == 3 * 500
        files = series._Files(wh)
        narrow = files.wanted(series._Selection([ids[1]]), series.grid_for(lo, lo + 600 * US, 60))
        total = sum(len(files.stats(rel)) for rel, _ in files.files)
        assert 0 < sum(len(groups) for _, groups in narrow) < total / 4
        relpaths = [rel for rel, _ in files.files]
    # A file whose rows are not sorted (not written by us) still gives exact means.
    target = home / relpaths[0]
    table = pq.read_table(target)
    shuffled = table.take(np.random.default_rng(5).permutation(table.num_rows))
    pq.write_table(shuffled, target, row_group_size=10_000)
    with open_warehouse(home) as wh:
        grid = series.grid_for(lo, hi, 120)
        assert_same(series.bucket_block(wh, ids, grid), reference(wh, ids, grid))
