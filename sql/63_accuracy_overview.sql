-- Analyst view `accuracy_overview`: accuracy per model × cutoff × horizon × vintage × level, from the rows
-- of accuracy_log that count (is_reference_run AND is_current): one run per cutoff and model (the newest
-- monthly run, else the newest backtest, so nothing is counted twice) and the newest scoring of each
-- forecast. The per-row measures come from the scoring step; here they are averaged. The scoring view
-- accuracy_summary groups by run kind instead. To pool several cutoffs, weight each row by n (rmse: the
-- n-weighted mean of rmse², then the root).
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
SELECT
    model, cutoff, horizon, vintage, level,
    any_value(run_id) AS run_id,
    any_value(run_kind) AS run_kind,
    count(*) AS n,
    avg(abs_error) AS mae,
    sqrt(avg(sq_error)) AS rmse,
    avg(scaled_error) AS mase,
    avg(wis) AS mean_wis,
    avg(wis_dispersion) AS mean_wis_dispersion,
    avg(wis_overprediction) AS mean_wis_overprediction,
    avg(wis_underprediction) AS mean_wis_underprediction,
    avg(error) AS bias,
    avg(CAST(covered_50 AS DOUBLE)) AS coverage_50,
    avg(CAST(covered_90 AS DOUBLE)) AS coverage_90,
    count(*) FILTER (WHERE exceeded) AS exceedances,
    count(*) FILTER (WHERE actual > 0) AS n_positive
FROM accuracy_log
WHERE is_reference_run AND is_current
GROUP BY model, cutoff, horizon, vintage, level;
