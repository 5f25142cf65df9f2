-- Layer 0: summaries of the accuracy log, so that the report and the accuracy views (sql/50_*, 51-54, 63) cost
-- what the newest scoring batches cost, not what the whole history costs.
--
-- Unit of work: a group = (run_id, target_month, vintage). Every table below holds, per group, what the
-- views need from its *current* rows (the rule of sql/50_accuracy_current.sql: the newest scoring of each
-- run x level x origin x destination x target month x vintage). A new batch makes its groups stale; they
-- are recomputed whole, together with every other group of the same target month and vintage (the
-- persistence pairs of skill_vs_persistence need both sides). The newest-run rules are applied when the
-- views read the tables, so a rerun only adds groups.
--
-- Written by dyadcast.report.summaries.refresh_summaries (at the start of every report build). Between a
-- scoring and the next refresh the views add a live computation of the stale groups (sql/50_13-50_18), so
-- no reader ever sees out-of-date numbers. Emptying these tables only makes the next read slower.

-- The batches (accuracy_rows.batch_id) whose rows the tables below include.
CREATE TABLE IF NOT EXISTS accuracy_summary_batches (
    batch_id         VARCHAR PRIMARY KEY,
    n_rows           BIGINT NOT NULL,
    first_scored_at  TIMESTAMP,
    last_scored_at   TIMESTAMP,
    summarised_at    TIMESTAMP NOT NULL
);

-- Sums and counts of the current rows per group, level and horizon (horizon follows from run and target).
CREATE TABLE IF NOT EXISTS accuracy_group_stats (
    run_id                    VARCHAR NOT NULL,
    cutoff                    DATE NOT NULL,
    model                     VARCHAR NOT NULL,
    run_kind                  VARCHAR NOT NULL,
    run_created_at            TIMESTAMP,
    level                     VARCHAR NOT NULL,
    horizon                   SMALLINT NOT NULL,
    target_month              DATE NOT NULL,
    vintage                   VARCHAR NOT NULL,
    n                         BIGINT NOT NULL,   -- current rows
    n_scaled                  BIGINT NOT NULL,   -- rows with a scaled_error (MASE defined)
    n_covered_50              BIGINT NOT NULL,
    n_covered_90              BIGINT NOT NULL,
    n_exceeded                BIGINT NOT NULL,
    n_predicted_positive      BIGINT NOT NULL,
    n_true_positive           BIGINT NOT NULL,   -- predicted_positive AND actual_positive
    n_actual_positive         BIGINT NOT NULL,   -- the flag actual_positive
    n_actual_above_zero       BIGINT NOT NULL,   -- actual > 0 (what accuracy_overview counts)
    sum_error                 DOUBLE NOT NULL,
    sum_abs_error             DOUBLE NOT NULL,
    sum_sq_error              DOUBLE NOT NULL,
    sum_scaled_error          DOUBLE,            -- NULL when n_scaled = 0
    sum_poisson_deviance      DOUBLE NOT NULL,
    sum_tweedie_deviance      DOUBLE NOT NULL,
    sum_wis                   DOUBLE NOT NULL,
    sum_wis_dispersion        DOUBLE NOT NULL,
    sum_wis_overprediction    DOUBLE NOT NULL,
    sum_wis_underprediction   DOUBLE NOT NULL
);

-- A run's current rows matched with those of a persistence run of the same cutoff and run kind on the same
-- target and actual (the join of skill_vs_persistence), summed per level and horizon. Pairs with no common
-- target have no row. Persistence is paired with itself.
CREATE TABLE IF NOT EXISTS accuracy_pair_stats (
    run_id                      VARCHAR NOT NULL,
    persistence_run_id          VARCHAR NOT NULL,
    level                       VARCHAR NOT NULL,
    horizon                     SMALLINT NOT NULL,
    target_month                DATE NOT NULL,
    vintage                     VARCHAR NOT NULL,
    n_common                    BIGINT NOT NULL,
    sum_wis                     DOUBLE NOT NULL,
    sum_wis_persistence         DOUBLE NOT NULL,
    sum_abs_error               DOUBLE NOT NULL,
    sum_abs_error_persistence   DOUBLE NOT NULL
);

-- Current dyad rows one month ahead (horizon 1) whose actual came in above q950: the rows of `exceedances`.
CREATE TABLE IF NOT EXISTS accuracy_exceedance_rows (
    run_id          VARCHAR NOT NULL,
    cutoff          DATE NOT NULL,
    model           VARCHAR NOT NULL,
    run_kind        VARCHAR NOT NULL,
    run_created_at  TIMESTAMP,
    target_month    DATE NOT NULL,
    vintage         VARCHAR NOT NULL,
    origin          VARCHAR NOT NULL,
    destination     VARCHAR NOT NULL,
    actual          DOUBLE NOT NULL,
    mean            DOUBLE NOT NULL,
    q500            DOUBLE NOT NULL,
    q950            DOUBLE NOT NULL
);

-- Per group, the 20 current dyad rows whose actual fell furthest outside the 90 % interval (beyond_90 > 0,
-- ties by origin, destination): enough for any top-20 over whole runs, which the report's surprises are.
CREATE TABLE IF NOT EXISTS accuracy_surprise_rows (
    run_id          VARCHAR NOT NULL,
    cutoff          DATE NOT NULL,
    model           VARCHAR NOT NULL,
    run_kind        VARCHAR NOT NULL,
    run_created_at  TIMESTAMP,
    horizon         SMALLINT NOT NULL,
    target_month    DATE NOT NULL,
    vintage         VARCHAR NOT NULL,
    origin          VARCHAR NOT NULL,
    destination     VARCHAR NOT NULL,
    actual          DOUBLE NOT NULL,
    q050            DOUBLE NOT NULL,
    q500            DOUBLE NOT NULL,
    q950            DOUBLE NOT NULL,
    beyond_90       DOUBLE NOT NULL
);
