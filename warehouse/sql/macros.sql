-- Statistical macros available on every connection (documented in the README).

-- Cantelli's one-sided inequality: mean + k*sd covers at least p of any distribution when
-- k = sqrt(p / (1 - p)).
CREATE OR REPLACE MACRO cantelli_k(p) AS sqrt(p / (1 - p));

-- The distribution-free sizing bound mean + k*sd for coverage p.
CREATE OR REPLACE MACRO cantelli_bound(mean, sd, p) AS mean + sqrt(p / (1 - p)) * sd;

-- The two-sided Chebyshev coverage 1 - 1/k^2 for the same k (0 when k <= 1).
CREATE OR REPLACE MACRO chebyshev_two_sided(k) AS greatest(0.0, 1 - 1 / (k * k));

-- Start of the fixed-width time bucket of `seconds` that holds ts (aligned to the epoch).
CREATE OR REPLACE MACRO bucket_start(ts, seconds) AS
    to_timestamp(floor(epoch(ts) / seconds) * seconds);
