-- Analyst view `accuracy_overview`: accuracy per model × cutoff × horizon × vintage × level, from the rows
-- of accuracy_log that count (is_reference_run AND is_current): one run per cutoff and model (the newest
-- monthly run, else the newest backtest, so nothing is counted twice) and the newest scoring of each
-- forecast. The per-row measures come from the scoring step; here they are averaged, from the per-group sums
-- of accuracy_groups (sql/50_15; is_reference_run of accuracy_summary_runs is the run rule above), so the
-- view costs the same however long the log is. The scoring view accuracy_summary groups by run kind
-- instead. To pool several cutoffs, weight each row by n (rmse: the n-weighted mean of rmse², then the root).
--
-- Columns
--   model, cutoff, horizon, vintage, level   the group
--   run_id, run_kind           the run that stands for this cutoff × model
--   n                          forecasts scored (dyads, or totals, that have an actual)
--   mae, rmse                  mean absolute / root mean squared error of the predictive mean
--   mase                       mean absolute scaled error (Hyndman & Koehler 2006; NULL if undefined)
--   mean_wis                   mean weighted interval score (lower is better)
--   mean_wis_dispersion, mean_wis_overprediction, mean_wis_underprediction   its three parts
--   bias                       mean of (forecast mean − actual): > 0 over-forecast
--   coverage_50, coverage_90   share of actuals inside the 50 % / 90 % interval (honest: about 0.50 / 0.90)
--   exceedances                actuals above q950 (expected about 5 % of n)
--   n_positive                 forecasts whose actual was above zero
CREATE OR REPLACE VIEW accuracy_overview AS
WITH summary_groups AS MATERIALIZED (
    SELECT * FROM accuracy_groups
)
SELECT
    g.model, g.cutoff, g.horizon, g.vintage, g.level,
    any_value(g.run_id) AS run_id,
    any_value(g.run_kind) AS run_kind,
    CAST(sum(g.n) AS BIGINT) AS n,
    sum(g.sum_abs_error) / sum(g.n) AS mae,
    sqrt(sum(g.sum_sq_error) / sum(g.n)) AS rmse,
    sum(g.sum_scaled_error) / nullif(sum(g.n_scaled), 0) AS mase,
    sum(g.sum_wis) / sum(g.n) AS mean_wis,
    sum(g.sum_wis_dispersion) / sum(g.n) AS mean_wis_dispersion,
    sum(g.sum_wis_overprediction) / sum(g.n) AS mean_wis_overprediction,
    sum(g.sum_wis_underprediction) / sum(g.n) AS mean_wis_underprediction,
    sum(g.sum_error) / sum(g.n) AS bias,
    sum(g.n_covered_50) / sum(g.n) AS coverage_50,
    sum(g.n_covered_90) / sum(g.n) AS coverage_90,
    CAST(sum(g.n_exceeded) AS BIGINT) AS exceedances,
    CAST(sum(g.n_actual_above_zero) AS BIGINT) AS n_positive
FROM summary_groups AS g
SEMI JOIN accuracy_summary_runs_of('summary_groups') AS r ON r.run_id = g.run_id AND r.is_reference_run
GROUP BY g.model, g.cutoff, g.horizon, g.vintage, g.level;
