"""`warehouse correlate` on the demo scenario and on planted noise; agreement with the SQL macro."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from warehouse.cli import cli
from warehouse.home import open_warehouse
from warehouse.stats import correlate as cs

LATENCY = "san01/pool=vdi/read_latency_ms"
HOST_CPU = "vdi-hv02/Processor/_Total/% Processor Time"


def run(*args: str):
    return CliRunner().invoke(cli, list(args), catch_exceptions=False)


def corr_json(home: Path, *args: str) -> dict:
    result = run("--home", str(home), "correlate", *args, "--format", "json")
    assert result.exit_code == 0, result.stderr
    return json.loads(result.output)


def test_pearson_agrees_with_the_sql_macro(demo_home: Path) -> None:
    """The command's Pearson r (rhythm kept, lag 0) equals DuckDB's corr() in the correlations() macro."""
    out = corr_json(demo_home, LATENCY, "--method", "pearson", "--top", "1000")
    with open_warehouse(demo_home) as wh:
        sql = {k: (r, n) for k, r, n in wh.con.execute(
            "SELECT key, r, n FROM correlations(?, 60) WHERE r IS NOT NULL", [LATENCY]).fetchall()}
    assert len(out["results"]) == out["counters_tested"] >= 70
    for row in out["results"]:
        r, n = sql[row["key"]]
        assert row["r"] == pytest.approx(r, abs=1e-9), row["key"]
        assert row["n"] == n and row["lag"] == 0


def test_planted_queue_leads_latency_by_two_buckets(demo_home: Path) -> None:
    """seed/SCENARIO.md: queue_depth leads the pool's read latency by exactly 2 samples."""
    out = corr_json(demo_home, LATENCY, "--max-lag", "5", "--top", "5")
    first = out["results"][0]
    assert first["key"] == "san01/pool=vdi/queue_depth"
    assert first["lag"] == 2 and first["r"] > 0.5 and first["q"] < 0.05
    assert 10 * out["counters_tested"] < out["tested"] <= 11 * out["counters_tested"]  # counters x 11 lags
    assert out["lag_convention"].startswith("lag +k: the counter moves k buckets BEFORE the target")


def test_planted_scan_is_first_suspect_on_a_thursday_afternoon(demo_home: Path) -> None:
    """seed/SCENARIO.md: scanagent drives vdi-hv02 CPU on Thursdays 13:00-13:40 local."""
    for method in ("spearman", "pearson"):
        out = corr_json(demo_home, HOST_CPU, "--from", "2026-03-19T12:00", "--to", "2026-03-19T15:00",
                        "--method", method)
        assert out["results"][0]["key"] == "vdi-hv02/Process/scanagent/% Processor Time", method
        assert out["results"][0]["r"] > 0.3 and out["results"][0]["q"] < 0.05


def test_table_view_marks_direction_lag_and_caution(demo_home: Path) -> None:
    result = run("--home", str(demo_home), "correlate", LATENCY, "--max-lag", "3", "--top", "3")
    assert result.exit_code == 0
    text = result.output
    assert "moves with" in text and "leads by 2 min" in text
    assert "Correlation is not causation" in text and "lag +k" in text


def test_rhythm_removal_changes_what_ranks(demo_home: Path) -> None:
    kept = corr_json(demo_home, HOST_CPU, "--top", "3")
    removed = corr_json(demo_home, HOST_CPU, "--top", "3", "--rhythm", "remove")
    assert kept["rhythm"] == "keep" and removed["rhythm"] == "remove"
    assert abs(removed["results"][0]["r"]) < abs(kept["results"][0]["r"])


def test_pairs_json(demo_home: Path) -> None:
    out = corr_json(demo_home, "--pairs", "--against", "vdi-hv0*", "--top", "5")
    assert set(out) >= {"against", "method", "bucket_seconds", "max_lag", "tested", "pairs"}
    assert len(out["pairs"]) == 5 and set(out["pairs"][0]) == {"a", "b", "r", "lag", "n", "q"}
    rs = [abs(p["r"]) for p in out["pairs"]]
    assert rs == sorted(rs, reverse=True)


def test_json_keys_are_stable(demo_home: Path) -> None:
    out = corr_json(demo_home, LATENCY, "--top", "2")
    assert set(out) >= {"target", "method", "bucket_seconds", "max_lag", "tested", "skipped", "results"}
    assert set(out["results"][0]) == {"key", "r", "lag", "n", "n_effective", "p", "q"}
    assert out["skipped"] >= 5  # the planted constant counters are skipped, never NaN
    assert all(np.isfinite(row["r"]) for row in out["results"])


@pytest.mark.parametrize("args, message", [
    (["no-such-counter"], "no counter matches"),
    ([LATENCY, "--from", "2027-01-01"], "no samples"),
    ([LATENCY, "--against", "san01/pool=vdi/capacity*"], "no counter shares"),
])
def test_bad_input_is_one_line(demo_home: Path, args: list[str], message: str) -> None:
    result = run("--home", str(demo_home), "correlate", *args)
    assert result.exit_code == 1 and result.stderr.count("\n") == 1 and message in result.stderr


def test_bucket_shorter_than_sampling_is_cautioned(demo_home: Path) -> None:
    out = corr_json(demo_home, LATENCY, "--bucket", "15s", "--top", "1", "--against", "san01/*")
    assert any("shorter than the sampling interval" in c for c in out["cautions"])


def test_pure_noise_rarely_passes_fdr() -> None:
    """Under the global null, Benjamini-Hochberg keeps the chance of any discovery at or below the FDR
    level (Benjamini & Hochberg 1995): at most 8% of 200 seeded runs of 500 noise counters report q < 0.05."""
    rng = np.random.default_rng(2026)
    runs_with_discovery = 0
    for _ in range(200):
        y = rng.standard_normal(120)
        X = rng.standard_normal((120, 500))
        lagged = cs.lagged_corr(y, X, 0)
        n_eff = cs.bretherton_n_eff(lagged.n, cs.lag1_autocorrelation(X)[None, :], float(cs.lag1_autocorrelation(y[:, None])[0]))
        q = cs.bh_qvalues(cs.p_values(lagged.r, n_eff))
        runs_with_discovery += bool((q < 0.05).any())
    assert runs_with_discovery <= 16
