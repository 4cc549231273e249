-- Statistical macros available on every connection (documented in the README).

-- Cantelli's one-sided inequality: P(X >= mean + k*sd) <= 1/(1+k^2) for any distribution, so
-- mean + k*sd covers at least p when k = sqrt(p / (1 - p)).
CREATE OR REPLACE MACRO cantelli_k(p) AS sqrt(p / (1 - p));

-- The coverage k^2 / (1 + k^2) that Cantelli guarantees for mean + k*sd.
CREATE OR REPLACE MACRO cantelli_coverage(k) AS CASE WHEN k <= 0 THEN 0.0 ELSE k * k / (1 + k * k) END;

-- Two-sided Chebyshev: |X - mean| < k*sd for at least 1 - 1/k^2; k for coverage p.
CREATE OR REPLACE MACRO chebyshev_k(p) AS 1 / sqrt(1 - p);

-- The two-sided Chebyshev coverage 1 - 1/k^2 for the same k (0 when k <= 1).
CREATE OR REPLACE MACRO chebyshev_coverage(k) AS greatest(0.0, 1 - 1 / (k * k));

-- The distribution-free sizing bound mean + k*sd for coverage p, from a mean and an sd.
CREATE OR REPLACE MACRO cantelli_bound(mean, sd, p) AS mean + sqrt(p / (1 - p)) * sd;

-- Aggregate: the sizing bound of a column (population sd, for which the guarantee holds on the
-- observed samples).
CREATE OR REPLACE MACRO sizing_bound(x, p) AS avg(x) + sqrt(p / (1 - p)) * stddev_pop(x);

-- Aggregate: the fraction of x at or below b.
CREATE OR REPLACE MACRO coverage_at(x, b) AS avg(CASE WHEN x <= b THEN 1.0 ELSE 0.0 END);

-- Start of the fixed-width time bucket of `seconds` that holds ts (aligned to the epoch).
CREATE OR REPLACE MACRO bucket_start(ts, seconds) AS
    to_timestamp(floor(epoch(ts) / seconds) * seconds);

-- Table macro: Pearson r and overlap n of every counter's bucket means against the target key's
-- (pairwise complete: buckets both have; r is NULL for a constant counter). For ad-hoc use; `warehouse correlate` adds ranks, lags,
-- autocorrelation-adjusted p-values and false-discovery control.
CREATE OR REPLACE MACRO correlations(target_key, bucket_seconds) AS TABLE
    WITH b AS (
        SELECT counter_id, epoch_us(ts) // (bucket_seconds * 1000000) AS k, avg(value) AS v
        FROM points GROUP BY ALL),
    t AS (
        SELECT b.k, sum(b.v) AS y FROM b JOIN counters c USING (counter_id)
        WHERE c.key = target_key GROUP BY b.k)
    SELECT key, CASE WHEN isnan(r) THEN NULL ELSE r END AS r, n FROM (
        SELECT c.key, corr(b.v, t.y) AS r, count(*) AS n
        FROM b JOIN t USING (k) JOIN counters c USING (counter_id)
        WHERE c.key <> target_key
        GROUP BY c.key);
