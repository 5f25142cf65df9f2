-- Layer 50 (accuracy). accuracy_summary: one row per model x run_kind x horizon x cutoff x vintage x level,
-- over the rows of accuracy_current (newest run per cutoff, newest row per vintage). Computed from the
-- per-group sums of accuracy_groups (sql/50_15), not from the log, so it costs the same however long the
-- history is; the numbers are those of the plain averages over accuracy_current.
-- Columns:
--   model, run_kind, horizon, cutoff, vintage, level   the group
--   n                       targets scored
--   mae, rmse               of the predictive mean
--   mase                    mean(abs_error / naive_scale); the scale is the run's pooled one-step persistence
--                           MAE in the history it saw (NULL when that history never changed)
--   mean_poisson_deviance, mean_tweedie_deviance      mean floored at deviance_floor (0.1), power 1.5
--   coverage_50, coverage_90                          share of actuals inside the central intervals
--   mean_wis, mean_wis_dispersion, mean_wis_overprediction, mean_wis_underprediction
--   bias                    mean(mean - actual); positive = over-forecast
--   precision, recall       of "arrivals > 0" with p_positive >= 0.5 as the positive call (NULL if undefined)
--   n_positive              targets with arrivals > 0
--   exceedances, exceedance_rate                      actual > q950 (nominal rate 5 %)
CREATE OR REPLACE VIEW accuracy_summary AS
WITH summary_groups AS MATERIALIZED (
    SELECT * FROM accuracy_groups
)
SELECT
    g.model, g.run_kind, g.horizon, g.cutoff, g.vintage, g.level,
    CAST(sum(g.n) AS BIGINT) AS n,
    sum(g.sum_abs_error) / sum(g.n) AS mae,
    sqrt(sum(g.sum_sq_error) / sum(g.n)) AS rmse,
    sum(g.sum_scaled_error) / nullif(sum(g.n_scaled), 0) AS mase,
    sum(g.sum_poisson_deviance) / sum(g.n) AS mean_poisson_deviance,
    sum(g.sum_tweedie_deviance) / sum(g.n) AS mean_tweedie_deviance,
    sum(g.n_covered_50) / sum(g.n) AS coverage_50,
    sum(g.n_covered_90) / sum(g.n) AS coverage_90,
    sum(g.sum_wis) / sum(g.n) AS mean_wis,
    sum(g.sum_wis_dispersion) / sum(g.n) AS mean_wis_dispersion,
    sum(g.sum_wis_overprediction) / sum(g.n) AS mean_wis_overprediction,
    sum(g.sum_wis_underprediction) / sum(g.n) AS mean_wis_underprediction,
    sum(g.sum_error) / sum(g.n) AS bias,
    sum(g.n_true_positive) / nullif(sum(g.n_predicted_positive), 0) AS precision,
    sum(g.n_true_positive) / nullif(sum(g.n_actual_positive), 0) AS recall,
    CAST(sum(g.n_actual_positive) AS BIGINT) AS n_positive,
    CAST(sum(g.n_exceeded) AS BIGINT) AS exceedances,
    sum(g.n_exceeded) / sum(g.n) AS exceedance_rate
FROM summary_groups AS g
SEMI JOIN accuracy_summary_runs_of('summary_groups') AS r ON r.run_id = g.run_id AND r.is_latest_run
GROUP BY g.model, g.run_kind, g.horizon, g.cutoff, g.vintage, g.level;
