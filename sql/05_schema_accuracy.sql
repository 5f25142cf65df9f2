-- Layer 0: accuracy tables. The Parquet files under accuracy/ (one per scoring batch, never rewritten) are
-- the audit record; accuracy_rows is their index for SQL, rebuilt from them by
-- dyadcast.scoring.rebuild_accuracy_index. scoring_checks and run_naive_scales are caches that make the
-- scoring step cheap; deleting them only makes the next scoring slower, never wrong.

-- One row per forecast row (dyad or total) x target month x vintage of the actual it was scored against.
-- Column order matches dyadcast.scoring.schema.ACCURACY_SCHEMA.
CREATE TABLE IF NOT EXISTS accuracy_rows (
    batch_id             VARCHAR NOT NULL,   -- accuracy/accuracy_<batch_id>.parquet holds this row
    scored_at            TIMESTAMP NOT NULL, -- UTC
    run_id               VARCHAR NOT NULL,
    cutoff               DATE NOT NULL,
    model                VARCHAR NOT NULL,
    run_kind             VARCHAR NOT NULL,   -- 'monthly' or 'backtest'
    as_of                DATE,
    run_created_at       TIMESTAMP,          -- snapshot_runs.created_at: picks the newest rerun
    level                VARCHAR NOT NULL,   -- 'dyad', 'origin_total', 'destination_total', 'world_total'
    origin               VARCHAR NOT NULL,   -- '*' for destination and world totals
    destination          VARCHAR NOT NULL,   -- '*' for origin and world totals
    horizon              SMALLINT NOT NULL,
    target_month         DATE NOT NULL,
    vintage              VARCHAR NOT NULL,   -- 'first_release' or 'latest'
    actual_vintage_key   VARCHAR NOT NULL,   -- 'load_id@published_on'; totals: the sorted set, '+'-joined
    actual_load_id       BIGINT NOT NULL,    -- totals: highest load_id among the summed dyads
    actual_published_on  DATE NOT NULL,      -- totals: latest publication among the summed dyads
    n_cells              INTEGER NOT NULL,   -- dyads summed (1 for a dyad)
    actual               DOUBLE NOT NULL,
    mean                 DOUBLE NOT NULL,
    q050                 DOUBLE NOT NULL,
    q250                 DOUBLE NOT NULL,
    q500                 DOUBLE NOT NULL,
    q750                 DOUBLE NOT NULL,
    q950                 DOUBLE NOT NULL,
    p_positive           DOUBLE NOT NULL,
    error                DOUBLE NOT NULL,    -- mean - actual (positive: over-forecast)
    abs_error            DOUBLE NOT NULL,
    sq_error             DOUBLE NOT NULL,
    naive_scale          DOUBLE,             -- MASE denominator of this run and level; NULL if undefined
    scaled_error         DOUBLE,             -- abs_error / naive_scale
    poisson_deviance     DOUBLE NOT NULL,    -- mean floored at deviance_floor
    tweedie_deviance     DOUBLE NOT NULL,    -- power tweedie_power, same floor
    tweedie_power        DOUBLE NOT NULL,
    deviance_floor       DOUBLE NOT NULL,
    covered_50           BOOLEAN NOT NULL,   -- q250 <= actual <= q750
    covered_90           BOOLEAN NOT NULL,   -- q050 <= actual <= q950
    interval_score_50    DOUBLE NOT NULL,
    interval_score_90    DOUBLE NOT NULL,
    wis                  DOUBLE NOT NULL,    -- weighted interval score (median, 50 % and 90 % intervals)
    wis_dispersion       DOUBLE NOT NULL,
    wis_overprediction   DOUBLE NOT NULL,
    wis_underprediction  DOUBLE NOT NULL,
    predicted_positive   BOOLEAN NOT NULL,   -- p_positive >= 0.5
    actual_positive      BOOLEAN NOT NULL,
    exceeded             BOOLEAN NOT NULL    -- actual > q950
);

-- The actuals fingerprint each (run, target month, vintage) was last scored against; a target is checked
-- again only when its month's set of vintages changes (a new load or a revision).
CREATE TABLE IF NOT EXISTS scoring_checks (
    run_id        VARCHAR NOT NULL,
    target_month  DATE NOT NULL,
    vintage       VARCHAR NOT NULL,
    fingerprint   VARCHAR NOT NULL,
    checked_at    TIMESTAMP NOT NULL,
    PRIMARY KEY (run_id, target_month, vintage)
);

-- MASE denominators per run and level, computed once from the history the run could see (as published by
-- its as-of date) and kept, so later revisions of old months do not change the scale of rows already written.
CREATE TABLE IF NOT EXISTS run_naive_scales (
    run_id       VARCHAR NOT NULL,
    level        VARCHAR NOT NULL,
    naive_scale  DOUBLE,
    n_pairs      BIGINT,             -- NULL when restored from the log by rebuild_accuracy_index
    computed_at  TIMESTAMP NOT NULL,
    PRIMARY KEY (run_id, level)
);
