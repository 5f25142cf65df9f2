-- Layer 0: tables. Raw rows are never updated or deleted; every row keeps the load that brought it
-- (load_id) and when its source published it (published_on), so any past state can be rebuilt.

CREATE SEQUENCE IF NOT EXISTS load_id_seq START 1;

CREATE TABLE IF NOT EXISTS loads (
    load_id         BIGINT PRIMARY KEY,
    file_name       VARCHAR NOT NULL,
    kind            VARCHAR NOT NULL,
    content_sha256  VARCHAR NOT NULL UNIQUE,
    published_on    DATE NOT NULL,
    loaded_at       TIMESTAMP NOT NULL,
    row_count       BIGINT NOT NULL,
    archived_as     VARCHAR
);

CREATE TABLE IF NOT EXISTS raw_flows (
    load_id       BIGINT NOT NULL,
    published_on  DATE NOT NULL,
    origin        VARCHAR NOT NULL,
    destination   VARCHAR NOT NULL,
    month         DATE NOT NULL,
    arrivals      BIGINT NOT NULL
);

CREATE TABLE IF NOT EXISTS raw_origin_indicators (
    load_id       BIGINT NOT NULL,
    published_on  DATE NOT NULL,
    country       VARCHAR NOT NULL,
    month         DATE NOT NULL,
    indicator     VARCHAR NOT NULL,
    value         DOUBLE
);

CREATE TABLE IF NOT EXISTS raw_destination_indicators (
    load_id       BIGINT NOT NULL,
    published_on  DATE NOT NULL,
    country       VARCHAR NOT NULL,
    month         DATE NOT NULL,
    indicator     VARCHAR NOT NULL,
    value         DOUBLE
);

CREATE TABLE IF NOT EXISTS raw_dyad_attributes (
    load_id          BIGINT NOT NULL,
    published_on     DATE NOT NULL,
    origin           VARCHAR NOT NULL,
    destination      VARCHAR NOT NULL,
    distance_km      DOUBLE NOT NULL,
    contiguous       SMALLINT NOT NULL,
    common_language  SMALLINT NOT NULL,
    colonial_tie     SMALLINT NOT NULL,
    diaspora         DOUBLE
);

CREATE TABLE IF NOT EXISTS raw_signals (
    load_id       BIGINT NOT NULL,
    published_on  DATE NOT NULL,
    country       VARCHAR NOT NULL,
    date          DATE NOT NULL,
    signal        VARCHAR NOT NULL,
    intensity     DOUBLE NOT NULL
);

CREATE TABLE IF NOT EXISTS rejected_files (
    file_name       VARCHAR NOT NULL,
    kind            VARCHAR,
    content_sha256  VARCHAR,
    rejected_at     TIMESTAMP NOT NULL,
    reason          VARCHAR NOT NULL,
    report_path     VARCHAR
);

-- Forecast index: every snapshot's rows, loaded when the snapshot is written. The Parquet files under
-- snapshots/ are the immutable record; these tables are a rebuildable index for SQL and scoring.
CREATE TABLE IF NOT EXISTS snapshot_runs (
    run_id         VARCHAR PRIMARY KEY,
    cutoff         DATE NOT NULL,
    model          VARCHAR NOT NULL,
    run_kind       VARCHAR NOT NULL,      -- 'monthly' or 'backtest'
    as_of          DATE NOT NULL,
    created_at     TIMESTAMP NOT NULL,
    path           VARCHAR NOT NULL,      -- folder of the snapshot (cutoff=/model=/run=)
    metadata_json  VARCHAR NOT NULL
);

CREATE TABLE IF NOT EXISTS forecast_rows (
    run_id        VARCHAR NOT NULL,
    cutoff        DATE NOT NULL,
    model         VARCHAR NOT NULL,
    run_kind      VARCHAR NOT NULL,
    level         VARCHAR NOT NULL,      -- 'dyad', 'origin_total', 'destination_total', 'world_total'
    origin        VARCHAR NOT NULL,      -- '*' for destination and world totals
    destination   VARCHAR NOT NULL,      -- '*' for origin and world totals
    horizon       SMALLINT NOT NULL,
    target_month  DATE NOT NULL,
    mean          DOUBLE NOT NULL,
    q050          DOUBLE NOT NULL,
    q250          DOUBLE NOT NULL,
    q500          DOUBLE NOT NULL,
    q750          DOUBLE NOT NULL,
    q950          DOUBLE NOT NULL,
    p_positive    DOUBLE NOT NULL
);
