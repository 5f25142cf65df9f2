-- Layer 50 (accuracy). accuracy_summary: one row per model x run_kind x horizon x cutoff x vintage x level,
-- over accuracy_current (newest run per cutoff, newest row per vintage).
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
SELECT
    model, run_kind, horizon, cutoff, vintage, level,
    count(*) AS n,
    avg(abs_error) AS mae,
    sqrt(avg(sq_error)) AS rmse,
    avg(scaled_error) AS mase,
    avg(poisson_deviance) AS mean_poisson_deviance,
    avg(tweedie_deviance) AS mean_tweedie_deviance,
    avg(CAST(covered_50 AS DOUBLE)) AS coverage_50,
    avg(CAST(covered_90 AS DOUBLE)) AS coverage_90,
    avg(wis) AS mean_wis,
    avg(wis_dispersion) AS mean_wis_dispersion,
    avg(wis_overprediction) AS mean_wis_overprediction,
    avg(wis_underprediction) AS mean_wis_underprediction,
    avg(error) AS bias,
    count(*) FILTER (WHERE predicted_positive AND actual_positive)
        / nullif(count(*) FILTER (WHERE predicted_positive), 0) AS precision,
    count(*) FILTER (WHERE predicted_positive AND actual_positive)
        / nullif(count(*) FILTER (WHERE actual_positive), 0) AS recall,
    count(*) FILTER (WHERE actual_positive) AS n_positive,
    count(*) FILTER (WHERE exceeded) AS exceedances,
    avg(CAST(exceeded AS DOUBLE)) AS exceedance_rate
FROM accuracy_current
GROUP BY model, run_kind, horizon, cutoff, vintage, level;
