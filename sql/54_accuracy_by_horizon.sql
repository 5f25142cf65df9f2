-- Layer 50 (accuracy). accuracy_by_horizon: one row per model x horizon x vintage x level, pooled over every
-- cutoff in accuracy_current, each cutoff once per model (its monthly run where there is one, else its
-- backtest, as in skill_vs_persistence), with the relative scores of skill_vs_persistence.
-- `dyadcast score` prints it.
-- Columns: model, horizon, vintage, level, n, n_cutoffs, first_cutoff, last_cutoff, mae, rmse, mase,
--   mean_wis, coverage_50, coverage_90, bias, exceedance_rate, relative_wis, relative_mae, n_common, note.
CREATE OR REPLACE VIEW accuracy_by_horizon AS
WITH pooled AS (
    SELECT
        model, horizon, vintage, level,
        count(*) AS n,
        count(DISTINCT cutoff) AS n_cutoffs,
        min(cutoff) AS first_cutoff,
        max(cutoff) AS last_cutoff,
        avg(abs_error) AS mae,
        sqrt(avg(sq_error)) AS rmse,
        avg(scaled_error) AS mase,
        avg(wis) AS mean_wis,
        avg(CAST(covered_50 AS DOUBLE)) AS coverage_50,
        avg(CAST(covered_90 AS DOUBLE)) AS coverage_90,
        avg(error) AS bias,
        avg(CAST(exceeded AS DOUBLE)) AS exceedance_rate
    FROM (
        SELECT * FROM accuracy_current
        QUALIFY dense_rank() OVER (PARTITION BY cutoff, model ORDER BY (run_kind = 'monthly') DESC) = 1
    )
    GROUP BY model, horizon, vintage, level
)
SELECT p.*, s.relative_wis, s.relative_mae, s.n_common, s.note
FROM pooled AS p
LEFT JOIN skill_vs_persistence AS s USING (model, horizon, vintage, level);
