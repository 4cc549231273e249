-- rollups: daily, weekly and monthly summaries per counter, and which ingests each has taken in
-- One row per counter and period. period_start is the local date (warehouse zone) of the period's
-- first midnight: any day, an ISO Monday, or the first of a month. n, mean, m2 (the sum of squared
-- deviations from the mean), min and max are the mergeable moments; the percentiles are computed
-- from the points of this period and must never be averaged across periods. sd is the population
-- sd, as in the sizing bound mean + sqrt(p/(1-p)) * sd at coverage p.
CREATE TABLE rollup_day (
    period_start      DATE NOT NULL,
    counter_id        INTEGER NOT NULL,
    n                 BIGINT NOT NULL,
    expected_n        BIGINT,
    mean              DOUBLE NOT NULL,
    sd                DOUBLE NOT NULL,
    min               DOUBLE NOT NULL,
    max               DOUBLE NOT NULL,
    p50               DOUBLE NOT NULL,
    p95               DOUBLE NOT NULL,
    p99               DOUBLE NOT NULL,
    bound             DOUBLE NOT NULL,
    coverage          DOUBLE NOT NULL,
    busiest_hour_mean DOUBLE NOT NULL,
    m2                DOUBLE NOT NULL,
    interval_s        DOUBLE,
    complete          BOOLEAN NOT NULL,
    computed_at       TIMESTAMPTZ NOT NULL,
    ingest_ids        VARCHAR[] NOT NULL,
    PRIMARY KEY (period_start, counter_id)
);
CREATE TABLE rollup_week (
    period_start      DATE NOT NULL,
    counter_id        INTEGER NOT NULL,
    n                 BIGINT NOT NULL,
    expected_n        BIGINT,
    mean              DOUBLE NOT NULL,
    sd                DOUBLE NOT NULL,
    min               DOUBLE NOT NULL,
    max               DOUBLE NOT NULL,
    p50               DOUBLE NOT NULL,
    p95               DOUBLE NOT NULL,
    p99               DOUBLE NOT NULL,
    bound             DOUBLE NOT NULL,
    coverage          DOUBLE NOT NULL,
    busiest_hour_mean DOUBLE NOT NULL,
    m2                DOUBLE NOT NULL,
    interval_s        DOUBLE,
    complete          BOOLEAN NOT NULL,
    computed_at       TIMESTAMPTZ NOT NULL,
    ingest_ids        VARCHAR[] NOT NULL,
    PRIMARY KEY (period_start, counter_id)
);
CREATE TABLE rollup_month (
    period_start      DATE NOT NULL,
    counter_id        INTEGER NOT NULL,
    n                 BIGINT NOT NULL,
    expected_n        BIGINT,
    mean              DOUBLE NOT NULL,
    sd                DOUBLE NOT NULL,
    min               DOUBLE NOT NULL,
    max               DOUBLE NOT NULL,
    p50               DOUBLE NOT NULL,
    p95               DOUBLE NOT NULL,
    p99               DOUBLE NOT NULL,
    bound             DOUBLE NOT NULL,
    coverage          DOUBLE NOT NULL,
    busiest_hour_mean DOUBLE NOT NULL,
    m2                DOUBLE NOT NULL,
    interval_s        DOUBLE,
    complete          BOOLEAN NOT NULL,
    computed_at       TIMESTAMPTZ NOT NULL,
    ingest_ids        VARCHAR[] NOT NULL,
    PRIMARY KEY (period_start, counter_id)
);

-- Which committed ingests each kind of rollup has already taken in; `warehouse rollup --due`
-- recomputes the periods of the ingests missing here.
CREATE TABLE rollup_seen (
    period    VARCHAR NOT NULL,   -- 'day', 'week' or 'month'
    ingest_id VARCHAR NOT NULL,
    rolled_at TIMESTAMPTZ NOT NULL,
    PRIMARY KEY (period, ingest_id)
);

-- Coverage of the stored sizing bound; change it with an UPDATE, then `warehouse rollup --all`.
INSERT INTO settings VALUES ('rollup_coverage', '0.95') ON CONFLICT DO NOTHING;
