"""The Spark engine against the DuckDB engine on the demo warehouse, and Spark's moment merges
against numpy and NIST StRD on uneven partitions.

One local Spark session serves the whole module (starting one costs tens of seconds here); the
Spark tests are skipped, with the reason, when pyspark or Java is missing.
"""
from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import duckdb
import numpy as np
import pytest
from click.testing import CliRunner

from warehouse.cli import cli
from warehouse.home import open_warehouse
from warehouse.render import render_rollup
from warehouse.rollup import RollupRequest, rollup
from warehouse.spark.session import spark_available

NIST = Path(__file__).parent / "reference" / "nist-strd"
WHY_NOT = spark_available()
needs_spark = pytest.mark.skipif(WHY_NOT is not None, reason=f"Spark engine not testable here: {WHY_NOT}")
KINDS = ("day", "week", "month")
MOMENTS = ("mean", "sd", "m2", "bound", "busiest_hour_mean")
QUANTILES = ("p50", "p95", "p99")
EXACT = ("period_start", "counter_id", "n", "expected_n", "min", "max", "coverage", "interval_s", "complete",
         "ingest_ids")
TARGET = "san01/pool=vdi/read_latency_ms"


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


@pytest.fixture(scope="module")
def spark():
    if WHY_NOT is not None:
        pytest.skip(WHY_NOT)
    from warehouse.spark.session import spark_session

    # Small jobs: few shuffle partitions; the JVM's quick (C1) compiler warms up sooner than the
    # optimising one (measured here: the first rollup job 31 s instead of 46 s).
    session = spark_session("local[2]", {"spark.sql.shuffle.partitions": "2",
                                         "spark.driver.extraJavaOptions": "-XX:TieredStopAtLevel=1 -XX:+UseSerialGC"})
    yield session
    session.stop()


@pytest.fixture(scope="module")
def rolled(spark, demo_home: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Two copies of the demo warehouse, every day, week and month rolled up by each engine."""
    from warehouse.spark.rollup import compute_plan

    root = tmp_path_factory.mktemp("engines")
    homes = {name: root / name for name in ("duckdb", "spark")}
    for home in homes.values():
        shutil.copytree(demo_home, home)
    req = RollupRequest(KINDS, "all")
    job = compute_plan(spark)
    summaries = {"duckdb": rollup(homes["duckdb"], req), "spark": rollup(homes["spark"], req, compute=job)}
    assert job.approximate == [] and job.cautions("week") == []      # the demo's periods take the exact path
    for a, b in zip(summaries["duckdb"], summaries["spark"]):
        assert {k: v for k, v in a.items() if k != "seconds"} == {k: v for k, v in b.items() if k != "seconds"}
    return homes


def _table(home: Path, sql: str):
    con = duckdb.connect(str(home / "catalog.duckdb"), read_only=True)
    try:
        return con.sql(sql).df()
    finally:
        con.close()


def _rel(a: np.ndarray, b: np.ndarray) -> float:
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    assert np.array_equal(np.isnan(a), np.isnan(b))
    ok = ~np.isnan(b)
    return float(np.max(np.abs(a[ok] - b[ok]) / np.maximum(np.abs(b[ok]), 1e-300), initial=0.0))


# -- rollups -----------------------------------------------------------------------------------------

@needs_spark
@pytest.mark.slow
@pytest.mark.parametrize("kind", KINDS)
def test_spark_rollup_rows_equal_duckdb_rows(rolled: dict[str, Path], kind: str) -> None:
    """Reference: the DuckDB engine's rows (tested against SQL and numpy.quantile in test_rollup.py).

    Every stored statistic: counts, intervals, completeness and ingest lists identical; moments to
    1e-9 (both merge per-part moments, in different orders); p50/p95/p99 to 1e-9 (Spark's exact
    percentile and DuckDB's quantile_cont interpolate between the same order statistics). The demo
    holds the 23-hour day of 2026-03-29 (clock change), so local periods are checked too."""
    sql = f"SELECT * EXCLUDE (computed_at) FROM rollup_{kind} ORDER BY period_start, counter_id"
    a, b = _table(rolled["spark"], sql), _table(rolled["duckdb"], sql)
    assert len(a) == len(b) > 0
    for col in EXACT:
        assert a[col].astype(str).tolist() == b[col].astype(str).tolist(), col
    for col in MOMENTS + QUANTILES:
        assert _rel(a[col], b[col]) <= 1e-9, col


@needs_spark
@pytest.mark.slow
def test_spark_rollup_records_what_it_took_in(rolled: dict[str, Path]) -> None:
    """The write is the DuckDB engine's: the same ingests recorded as taken in, so --due agrees."""
    sql = "SELECT period, ingest_id FROM rollup_seen ORDER BY ALL"
    assert _table(rolled["spark"], sql).values.tolist() == _table(rolled["duckdb"], sql).values.tolist()


@needs_spark
@pytest.mark.slow
def test_spark_approximate_quantiles_stay_within_the_stated_rank_error(spark, demo_home: Path,
                                                                      tmp_path: Path) -> None:
    """Reference: the sorted points of each counter-week (DuckDB). Spark's percentile_approx with
    accuracy A returns an observed value whose rank is within n / A of the exact rank (Spark's
    documentation: "1.0/accuracy is the relative error of the approximation")."""
    from warehouse.spark.rollup import _PERIOD_OF, APPROX_ACCURACY, _largest_group, compute_plan

    home = tmp_path / "approx"
    shutil.copytree(demo_home, home)
    # a limit below the weeks' sizes: the engine counts the largest group, then takes the approximate path
    job = compute_plan(spark, limit=1000)
    (summary,) = rollup(home, RollupRequest(("week",), "since", "2026-03-16"), compute=job)
    assert job.approximate == ["week"]
    line = render_rollup([dict(summary, cautions=job.cautions("week"))]).splitlines()[-1]
    assert line.startswith("caution: p50, p95 and p99 of these week rows are approximate (Spark's percentile_approx")
    with open_warehouse(home) as wh:
        rows = wh.con.execute("SELECT counter_id, period_start, n, p50, p95, p99 FROM rollup_week"
                              " WHERE period_start >= DATE '2026-03-16'").fetchall()
        points = wh.con.execute("""
            SELECT counter_id, date_trunc('week', (ts AT TIME ZONE 'Europe/Berlin'))::DATE AS w, list(value ORDER BY value)
            FROM points WHERE value IS NOT NULL AND ts >= TIMESTAMPTZ '2026-03-16 00:00:00+01' GROUP BY ALL""").fetchall()
    values = {(c, w): np.array(v) for c, w, v in points}
    assert len(rows) == len(values) > 0
    assert _largest_group(spark, _PERIOD_OF["week"], "Europe/Berlin") == max(r[2] for r in rows) > 1000
    for cid, week, n, *qs in rows:
        x = values[(cid, week)]
        assert len(x) == n
        slack = math.ceil(n / APPROX_ACCURACY) + 1
        for p, q in zip((0.5, 0.95, 0.99), qs):
            lo, hi = max(0, math.floor(p * (n - 1)) - slack), min(n - 1, math.ceil(p * (n - 1)) + slack)
            assert x[lo] <= q <= x[hi], (cid, week, p)
            assert q in x      # an observed value, not an interpolation


# -- size and correlate through the command line ------------------------------------------------------

def _both(home: Path, *args: str) -> tuple[dict, dict]:
    out = {}
    for engine in ("duckdb", "spark"):
        result = run("--home", str(home), "--engine", engine, *args, "--format", "json")
        assert result.exit_code == 0, result.output
        out[engine] = json.loads(result.output)
    return out["duckdb"], out["spark"]


def _same(a: object, b: object, path: str = "") -> None:
    """Equal, floats to 1e-9 relative (p-values and q-values near 0 to 1e-300 absolute)."""
    if isinstance(a, dict):
        assert isinstance(b, dict) and a.keys() == b.keys(), path
        for k in a:
            _same(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b)):
            _same(x, y, f"{path}[{i}]")
    elif isinstance(a, float) and isinstance(b, float):
        assert b == pytest.approx(a, rel=1e-9, abs=1e-300), path
    else:
        assert a == b, path


@needs_spark
@pytest.mark.slow
def test_spark_size_equals_duckdb(spark, demo_home: Path) -> None:
    """Reference: the DuckDB engine. Spark combines the four pools' bucket means; the bound, the
    percentiles, the bootstrap interval, the busiest-hours window and the cautions follow."""
    duck, on_spark = _both(demo_home, "size", "san01/pool=*/*_iops", "--combine", "sum", "--window",
                           "busiest-hours", "--days", "mon-fri")
    assert duck["n"] > 1000 and duck["cautions"]
    _same(duck, on_spark)


@needs_spark
@pytest.mark.slow
@pytest.mark.parametrize("method", ["pearson", "spearman"])
def test_spark_correlations_equal_duckdb(spark, demo_home: Path, method: str) -> None:
    """Reference: the DuckDB engine (tested against scipy in test_correlate_stats.py). Every
    counter's r, best lag, overlap n, effective n, p and q, and the counts of tests, skipped and
    passing counters, over two days with lags -2..2."""
    duck, on_spark = _both(demo_home, "correlate", TARGET, "--method", method, "--max-lag", "2", "--top", "500",
                           "--from", "2026-03-18", "--to", "2026-03-20")
    assert duck["counters_tested"] > 50 and duck["passing"] > 0
    _same(duck, on_spark)


# -- the merges behind them: uneven partitions, one-row partitions, a huge offset ---------------------

def _nist(name: str) -> np.ndarray:
    lines = (NIST / f"{name}.dat").read_text(encoding="ascii").splitlines()
    return np.array([float(v) for v in lines[60:] if v.strip()])


def _partitioned(spark, rows: list[tuple], sizes: list[int], schema: str):
    """A DataFrame whose partitions hold exactly `sizes` rows each, in order."""
    assert sum(sizes) == len(rows)
    cuts = np.cumsum([0] + sizes)
    chunks = [rows[a:b] for a, b in zip(cuts[:-1], cuts[1:])]
    rdd = spark.sparkContext.parallelize(chunks, len(chunks)).flatMap(lambda chunk: chunk)
    assert rdd.glom().map(len).collect() == sizes
    return spark.createDataFrame(rdd, schema)


@needs_spark
@pytest.mark.slow
def test_spark_moment_merge_meets_nist_numacc4_on_uneven_partitions(spark) -> None:
    """Source: NIST StRD NumAcc4 certified mean 10000000.2 and sd 0.1 (tests/reference/SOURCES.md,
    section 1; certified.json). Split into partitions of 1, 1, 2, 497 and 500 rows and merged by
    Spark, the mean must be right to 1e-13 and the sd reach the best log relative error possible
    from the float64 inputs (8.3, certified.json) less one digit, where the textbook one-pass
    formula sqrt((sum x^2 - n mean^2) / (n - 1)) loses every digit."""
    from warehouse.spark.points import moments_sql

    x = _nist("NumAcc4")
    entry = json.loads((NIST / "certified.json").read_text(encoding="ascii"))["univariate"]["NumAcc4"]
    frame = _partitioned(spark, [(0, float(v)) for v in x], [1, 1, 2, 497, 500], "g INT, x DOUBLE")
    frame.createOrReplaceTempView("numacc4")
    row = spark.sql(f"SELECT {moments_sql('x')} FROM numacc4 GROUP BY g").first()
    n = row["n"]
    sd = math.sqrt(row["var"] * n / (n - 1))
    assert n == 1001 and (row["lo"], row["hi"]) == (x.min(), x.max())
    assert row["mean"] == pytest.approx(entry["certified"]["mean"], rel=1e-13)
    lre = -math.log10(abs(sd - 0.1) / 0.1) if sd != 0.1 else 15.0
    assert lre >= entry["verification"]["lre_best_possible_from_float64_inputs"]["s"] - 1.0
    naive = math.sqrt(max(float((x * x).sum()) - n * float(x.mean()) ** 2, 0.0) / (n - 1))
    assert abs(naive - 0.1) / 0.1 > 1e-3          # the check tells a naive merge from a sound one


@needs_spark
@pytest.mark.slow
def test_spark_moment_and_comoment_merges_match_numpy_per_group(spark) -> None:
    """Reference: numpy two-pass moments and np.corrcoef per group. Three groups over partitions
    of 1, 3, 1, 250, 1 and 744 rows (a group's rows spread over several of them), values offset
    by 1e9 with deviations about 1 (harder than NumAcc4's 1e7 and 0.1), y a noisy linear function
    of x. At that offset a float64 input keeps about 7 significant digits of its deviation
    (2^-52 * 1e9 = 2e-7), so any merge of float64 moments, numpy's included, agrees to about 1e-7
    (variance and r to 1e-6 asserted); the textbook sums of squares and products lose every digit."""
    from warehouse.spark.points import comoments_sql, moments_sql

    rng = np.random.default_rng(10)
    g = rng.integers(0, 3, 1000)
    x = 1e9 + rng.gamma(2.0, 0.5, 1000)
    y = -3e8 - 2.0 * x + rng.normal(0.0, 1.0, 1000)
    rows = [(int(a), float(b), float(c)) for a, b, c in zip(g, x, y)]
    frame = _partitioned(spark, rows, [1, 3, 1, 250, 1, 744], "g INT, x DOUBLE, y DOUBLE")
    frame.createOrReplaceTempView("grouped")
    got = {r["g"]: r for r in spark.sql(
        f"SELECT g, {moments_sql('x')}, {comoments_sql('x', 'y').replace('AS n,', 'AS pairs,')}"
        " FROM grouped GROUP BY g").collect()}
    for k in range(3):
        xs, ys = x[g == k], y[g == k]
        r = got[k]
        assert r["n"] == r["pairs"] == len(xs)
        assert r["mean"] == pytest.approx(xs.mean(), rel=1e-14)
        assert r["var"] == pytest.approx(np.var(xs), rel=1e-6)   # deviations ~1 under a 1e9 offset: 1e-7 of x's digits
        assert (r["lo"], r["hi"], r["y_lo"], r["y_hi"]) == (xs.min(), xs.max(), ys.min(), ys.max())
        assert r["r"] == pytest.approx(np.corrcoef(xs, ys)[0, 1], rel=1e-6)
        m = len(xs)
        with np.errstate(invalid="ignore", divide="ignore"):
            naive = ((xs * ys).sum() - xs.sum() * ys.sum() / m) / np.sqrt(
                ((xs * xs).sum() - xs.sum() ** 2 / m) * ((ys * ys).sum() - ys.sum() ** 2 / m))
        assert not abs(naive - np.corrcoef(xs, ys)[0, 1]) < 1e-3     # the check tells naive sums from a merge


# -- the command line without Spark ------------------------------------------------------------------

def test_engine_spark_without_pyspark_or_java_is_one_line(demo_home: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """No traceback when Spark cannot run here: one line saying what to install, exit 1."""
    import warehouse.spark.session as session

    monkeypatch.setattr(session, "spark_available", lambda: "pyspark is not installed: pip install 'counter-warehouse[spark]'")
    result = run("--home", str(demo_home), "--engine", "spark", "size", "san01/pool=vdi/read_iops")
    assert result.exit_code == 1
    assert result.stderr == ("Error: --engine spark: pyspark is not installed: pip install 'counter-warehouse[spark]'\n")


def test_engine_spark_refuses_pairs_and_rhythm_removal_before_starting(demo_home: Path) -> None:
    result = run("--home", str(demo_home), "--engine", "spark", "correlate", "--pairs", "--against", "san01/*")
    assert result.exit_code == 1 and result.stderr == "Error: --pairs runs on the duckdb engine only: drop --engine spark\n"
    result = run("--home", str(demo_home), "--engine", "spark", "correlate", TARGET, "--rhythm", "remove")
    assert result.exit_code == 1 and "--rhythm remove runs on the duckdb engine only" in result.stderr
    assert run("--engine", "cluster", "status").exit_code == 2
