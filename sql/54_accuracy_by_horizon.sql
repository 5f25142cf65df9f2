-- Layer 50 (accuracy). accuracy_by_horizon: one row per model x horizon x vintage x level, pooled over every
-- cutoff in accuracy_current, each cutoff once per model (its monthly run where there is one, else its
-- backtest, as in skill_vs_persistence), with the relative scores of skill_vs_persistence.
-- `dyadcast score` prints it. Computed from the per-group sums of accuracy_groups (sql/50_15).
-- Columns: model, horizon, vintage, level, n, n_cutoffs, first_cutoff, last_cutoff, mae, rmse, mase,
--   mean_wis, coverage_50, coverage_90, bias, exceedance_rate, relative_wis, relative_mae, n_common, note.
CREATE OR REPLACE VIEW accuracy_by_horizon AS
WITH summary_groups AS MATERIALIZED (
    SELECT * FROM accuracy_groups
),
pooled AS (
    SELECT
        g.model, g.horizon, g.vintage, g.level,
        CAST(sum(g.n) AS BIGINT) AS n,
        count(DISTINCT g.cutoff) AS n_cutoffs,
        min(g.cutoff) AS first_cutoff,
        max(g.cutoff) AS last_cutoff,
        sum(g.sum_abs_error) / sum(g.n) AS mae,
        sqrt(sum(g.sum_sq_error) / sum(g.n)) AS rmse,
        sum(g.sum_scaled_error) / nullif(sum(g.n_scaled), 0) AS mase,
        sum(g.sum_wis) / sum(g.n) AS mean_wis,
        sum(g.n_covered_50) / sum(g.n) AS coverage_50,
        sum(g.n_covered_90) / sum(g.n) AS coverage_90,
        sum(g.sum_error) / sum(g.n) AS bias,
        sum(g.n_exceeded) / sum(g.n) AS exceedance_rate
    FROM summary_groups AS g
    SEMI JOIN accuracy_summary_runs_of('summary_groups') AS r ON r.run_id = g.run_id AND r.is_skill_run
    GROUP BY g.model, g.horizon, g.vintage, g.level
)
SELECT p.*, s.relative_wis, s.relative_mae, s.n_common, s.note
FROM pooled AS p
LEFT JOIN skill_vs_persistence AS s USING (model, horizon, vintage, level);
