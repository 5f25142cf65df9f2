-- Layer 50 (accuracy summaries). accuracy_group_stats_of(current_rows): rows of accuracy_group_stats
-- (sql/06_schema_accuracy_summaries.sql) computed from the relation named `current_rows` (shaped like
-- accuracy_current_rows_of).
CREATE OR REPLACE MACRO accuracy_group_stats_of(current_rows) AS TABLE
SELECT
    run_id, cutoff, model, run_kind, run_created_at, level, horizon, target_month, vintage,
    count(*) AS n,
    count(scaled_error) AS n_scaled,
    count(*) FILTER (WHERE covered_50) AS n_covered_50,
    count(*) FILTER (WHERE covered_90) AS n_covered_90,
    count(*) FILTER (WHERE exceeded) AS n_exceeded,
    count(*) FILTER (WHERE predicted_positive) AS n_predicted_positive,
    count(*) FILTER (WHERE predicted_positive AND actual_positive) AS n_true_positive,
    count(*) FILTER (WHERE actual_positive) AS n_actual_positive,
    count(*) FILTER (WHERE actual > 0) AS n_actual_above_zero,
    sum(error) AS sum_error,
    sum(abs_error) AS sum_abs_error,
    sum(sq_error) AS sum_sq_error,
    sum(scaled_error) AS sum_scaled_error,
    sum(poisson_deviance) AS sum_poisson_deviance,
    sum(tweedie_deviance) AS sum_tweedie_deviance,
    sum(wis) AS sum_wis,
    sum(wis_dispersion) AS sum_wis_dispersion,
    sum(wis_overprediction) AS sum_wis_overprediction,
    sum(wis_underprediction) AS sum_wis_underprediction
FROM query_table(current_rows)
GROUP BY run_id, cutoff, model, run_kind, run_created_at, level, horizon, target_month, vintage;
