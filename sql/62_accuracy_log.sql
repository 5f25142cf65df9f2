-- Analyst view `accuracy_log`: every scored forecast row (table accuracy_rows, appended by the scoring
-- step; its Parquet twin under accuracy/ is the audit record), plus flags that say which rows count.
-- A row is one forecast (dyad or total) × target month × vintage of the actual. Nothing is deleted:
-- reruns and later revisions add rows, and the flags pick. The rules match the scoring views
-- (sql/50_accuracy_current.sql): is_latest_run AND is_current selects exactly accuracy_current.
-- Filter on model, level and vintage where you can: DuckDB then reads only those rows (they lead the
-- window's partition), which is about ten times faster on a large log than filtering afterwards.
--
-- Columns
--   run_id, cutoff, model, run_kind, as_of   the forecast run (see forecasts_all)
--   level, origin, destination     as in forecasts_all ('*' on the side a total spans)
--   horizon, target_month          months after the cutoff; the month forecast
--   vintage                        'first_release' (scored against the first published figure) or 'latest'
--                                  (against the newest revision known when scored)
--   actual_load_id, actual_published_on   load and publication date of the actual (totals: the newest)
--   n_cells                        dyads summed into the actual (1 for a dyad)
--   actual                         reported arrivals
--   mean, q050, q250, q500, q750, q950, p_positive   the forecast (q500 is the median)
--   error, abs_error, sq_error     mean − actual (> 0: over-forecast), its absolute value and square
--   scaled_error                   abs_error / the run's MASE scale (NULL when the scale is undefined)
--   poisson_deviance, tweedie_deviance   per-row deviances (mean floored, see 05_schema_accuracy.sql)
--   covered_50, covered_90         actual inside [q250, q750] / [q050, q950]
--   wis, wis_dispersion, wis_overprediction, wis_underprediction
--                                  weighted interval score and its parts (Bracher et al. 2021); lower is better
--   exceeded                       actual above q950
--   scored_at, batch_id            when it was scored; accuracy/accuracy_<batch_id>.parquet holds it
--   beyond_90                      how far the actual fell outside the 90 % interval, in arrivals (0 inside)
--   is_latest_run                  the newest run of its cutoff × model × run_kind
--   is_reference_run               the run that stands for its cutoff × model: the newest monthly run, else
--                                  the newest backtest (accuracy_overview and the report use it)
--   is_current                     the newest scoring of this row × vintage (a revision adds a new 'latest'
--                                  row; the older one stays with is_current = false)
CREATE OR REPLACE VIEW accuracy_log AS
WITH runs AS (
    SELECT
        run_id,
        row_number() OVER (
            PARTITION BY cutoff, model, run_kind ORDER BY run_created_at DESC NULLS LAST, run_id DESC
        ) = 1 AS is_latest_run,
        row_number() OVER (
            PARTITION BY cutoff, model
            ORDER BY (run_kind = 'monthly') DESC, run_created_at DESC NULLS LAST, run_id DESC
        ) = 1 AS is_reference_run
    FROM (
        SELECT run_id, any_value(cutoff) AS cutoff, any_value(model) AS model, any_value(run_kind) AS run_kind,
               max(run_created_at) AS run_created_at
        FROM accuracy_rows
        GROUP BY run_id
    )
)
SELECT
    a.run_id, a.cutoff, a.model, a.run_kind, a.as_of, a.level, a.origin, a.destination, a.horizon, a.target_month,
    a.vintage, a.actual_load_id, a.actual_published_on, a.n_cells, a.actual,
    a.mean, a.q050, a.q250, a.q500, a.q750, a.q950, a.p_positive,
    a.error, a.abs_error, a.sq_error, a.scaled_error, a.poisson_deviance, a.tweedie_deviance,
    a.covered_50, a.covered_90, a.wis, a.wis_dispersion, a.wis_overprediction, a.wis_underprediction, a.exceeded,
    a.scored_at, a.batch_id,
    greatest(a.actual - a.q950, a.q050 - a.actual, 0) AS beyond_90,
    r.is_latest_run,
    r.is_reference_run,
    -- model, level and vintage are implied by the rest of the key; listed first so filters on them push down
    row_number() OVER (
        PARTITION BY a.model, a.level, a.vintage, a.run_id, a.origin, a.destination, a.target_month
        ORDER BY a.scored_at DESC, a.actual_published_on DESC, a.actual_load_id DESC, a.actual_vintage_key DESC
    ) = 1 AS is_current
FROM accuracy_rows AS a
JOIN runs AS r USING (run_id);
