-- Layer 0: ingestion bookkeeping, beside `loads` and `rejected_files` of 00_schema.sql.
-- Both tables are append-only and written by dyadcast.ingest.

-- One row per load, written in the same transaction as the load: where the publication date came from and
-- what the file held, so a vintage can be explained without opening the archived file.
CREATE TABLE IF NOT EXISTS load_details (
    load_id             BIGINT PRIMARY KEY,
    source_format       VARCHAR NOT NULL,    -- 'csv' or 'parquet'
    source_bytes        BIGINT NOT NULL,
    publication_source  VARCHAR NOT NULL,    -- 'column' (published_on), 'file name' (_YYYY-MM-DD) or 'load date'
    first_published_on  DATE NOT NULL,
    last_published_on   DATE NOT NULL,       -- = loads.published_on
    vintages            INTEGER NOT NULL,    -- distinct published_on values in the file
    period_first        DATE,                -- first and last month (or day, for signals) in the file
    period_last         DATE,
    notes               VARCHAR              -- e.g. extra columns that were ignored
);

-- One row per file per ingest run (accepted, rejected or skipped): the audit trail of exactly-once loading.
CREATE TABLE IF NOT EXISTS ingest_events (
    event_at        TIMESTAMP NOT NULL,      -- UTC
    file_name       VARCHAR NOT NULL,
    status          VARCHAR NOT NULL,        -- 'accepted', 'rejected', 'skipped'
    kind            VARCHAR,
    content_sha256  VARCHAR,
    load_id         BIGINT,                  -- the new load, or the earlier load a skipped file duplicates
    row_count       BIGINT,
    reason          VARCHAR,
    moved_to        VARCHAR                  -- path relative to the workspace; NULL when the file stayed in the inbox
);
