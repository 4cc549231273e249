-- catalog: settings, sources, counters, ingests and the files each ingest committed
CREATE TABLE settings (
    name  VARCHAR PRIMARY KEY,
    value VARCHAR NOT NULL
);

CREATE TABLE sources (
    source_id INTEGER PRIMARY KEY,
    name      VARCHAR NOT NULL UNIQUE,
    slug      VARCHAR NOT NULL UNIQUE,
    created   TIMESTAMPTZ NOT NULL
);

-- One row per counter identity. key is the canonical text users type and globs match.
CREATE TABLE counter_defs (
    counter_id INTEGER PRIMARY KEY,
    source_id  INTEGER NOT NULL,
    host       VARCHAR NOT NULL,
    object     VARCHAR NOT NULL,
    instance   VARCHAR NOT NULL,
    counter    VARCHAR NOT NULL,
    unit       VARCHAR NOT NULL,
    kind       VARCHAR NOT NULL,   -- 'gauge', or 'rate' for a cumulative total stored per second
    key        VARCHAR NOT NULL,
    UNIQUE (source_id, host, object, instance, counter)
);

-- One row per loaded file, written in the same transaction as its files: committed last.
CREATE TABLE ingests (
    ingest_id         VARCHAR PRIMARY KEY,
    source_id         INTEGER NOT NULL,
    path              VARCHAR NOT NULL,
    sha256            VARCHAR NOT NULL,
    bytes             BIGINT NOT NULL,
    layout            VARCHAR NOT NULL,
    rows_read         BIGINT NOT NULL,
    rows_loaded       BIGINT NOT NULL,
    rows_quarantined  BIGINT NOT NULL,
    cells_quarantined BIGINT NOT NULL,
    values_loaded     BIGINT NOT NULL,
    duplicates        BIGINT NOT NULL,
    first_ts          TIMESTAMPTZ,
    last_ts           TIMESTAMPTZ,
    started           TIMESTAMPTZ NOT NULL,
    finished          TIMESTAMPTZ NOT NULL,
    status            VARCHAR NOT NULL,  -- 'loaded'
    quarantine_file   VARCHAR            -- relative to the home, or NULL when nothing was quarantined
);

-- The Parquet files of each ingest, relative to the home. The points view reads only these.
CREATE TABLE ingest_files (
    ingest_id  VARCHAR NOT NULL,
    relpath    VARCHAR NOT NULL PRIMARY KEY,
    day        DATE NOT NULL,
    rows       BIGINT NOT NULL,
    bytes      BIGINT NOT NULL
);

CREATE SEQUENCE counter_ids START 1;
CREATE SEQUENCE source_ids START 1;
