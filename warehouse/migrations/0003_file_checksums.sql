-- file checksums: sha256 of every Parquet file as written, and the files `check --repair` set aside
-- NULL for files written before this migration: `check --deep` then verifies their row counts only.
ALTER TABLE ingest_files ADD COLUMN sha256 VARCHAR;
ALTER TABLE ingests ADD COLUMN quarantine_sha256 VARCHAR;

-- One row per file found damaged on disk and moved out of the way: what was lost, and why.
CREATE TABLE damaged_files (
    relpath     VARCHAR NOT NULL,   -- where the file was, relative to the home
    moved_to    VARCHAR,            -- where it is now, under damaged/ (NULL: it was missing)
    ingest_id   VARCHAR NOT NULL,
    kind        VARCHAR NOT NULL,   -- 'points' or 'quarantine'
    day         DATE,               -- points files: the UTC day
    rows        BIGINT,             -- rows the catalog recorded for it: what queries no longer see
    source_path VARCHAR,            -- the input file of that ingest, to load again with --replace
    reason      VARCHAR NOT NULL,
    found       TIMESTAMPTZ NOT NULL
);
