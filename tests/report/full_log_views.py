"""The accuracy views as they were first written: plain aggregates over every row of the log (through the
views accuracy_current and accuracy_log, which still read the whole log). The tests use them as the oracle
for the views that now read the summaries (sql/50_*, 51-54, 63): same rows, same numbers.
"""

from __future__ import annotations

FULL_LOG = {
    "accuracy_summary": """
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
GROUP BY g.model, g.run_kind, g.horizon, g.cutoff, g.vintage, g.level
""",
    "skill_vs_persistence": """
WITH summary_groups AS MATERIALIZED (
    SELECT * FROM accuracy_groups
),
skill_runs AS MATERIALIZED (
    SELECT run_id, model FROM accuracy_summary_runs_of('summary_groups') WHERE is_skill_run
),
model_groups AS MATERIALIZED (
    SELECT g.model, g.horizon, g.vintage, g.level, g.n
    FROM summary_groups AS g
    SEMI JOIN skill_runs AS r ON r.run_id = g.run_id
),
compared AS (
    SELECT r.model, p.horizon, p.vintage, p.level,
           CAST(sum(p.n_common) AS BIGINT) AS n_common,
           sum(p.sum_wis) / nullif(sum(p.sum_wis_persistence), 0) AS relative_wis,
           sum(p.sum_abs_error) / nullif(sum(p.sum_abs_error_persistence), 0) AS relative_mae,
           sum(p.sum_wis) / sum(p.n_common) AS mean_wis,
           sum(p.sum_wis_persistence) / sum(p.n_common) AS persistence_mean_wis,
           sum(p.sum_abs_error) / sum(p.n_common) AS mae,
           sum(p.sum_abs_error_persistence) / sum(p.n_common) AS persistence_mae
    FROM accuracy_pairs AS p
    JOIN skill_runs AS r ON r.run_id = p.run_id
    SEMI JOIN skill_runs AS pr ON pr.run_id = p.persistence_run_id AND pr.model = 'persistence'
    GROUP BY r.model, p.horizon, p.vintage, p.level
),
model_counts AS (
    SELECT model, horizon, vintage, level, CAST(sum(n) AS BIGINT) AS n_model
    FROM model_groups GROUP BY model, horizon, vintage, level
),
persistence_counts AS (
    SELECT horizon, vintage, level, CAST(sum(n) AS BIGINT) AS n_persistence
    FROM model_groups WHERE model = 'persistence' GROUP BY horizon, vintage, level
)
SELECT
    mc.model, mc.horizon, mc.vintage, mc.level,
    mc.n_model,
    coalesce(pc.n_persistence, 0) AS n_persistence,
    coalesce(c.n_common, 0) AS n_common,
    c.relative_wis, c.relative_mae,
    c.mean_wis, c.persistence_mean_wis, c.mae, c.persistence_mae,
    (coalesce(c.n_common, 0) < mc.n_model OR coalesce(c.n_common, 0) < coalesce(pc.n_persistence, 0)) AS sets_differ,
    CASE
        WHEN coalesce(c.n_common, 0) = 0 THEN 'no target forecast by both this model and persistence'
        WHEN c.n_common < mc.n_model OR c.n_common < pc.n_persistence THEN
            'compared on ' || c.n_common || ' common targets (model scored ' || mc.n_model
            || ', persistence ' || pc.n_persistence || ')'
        ELSE NULL
    END AS note
FROM model_counts AS mc
LEFT JOIN persistence_counts AS pc USING (horizon, vintage, level)
LEFT JOIN compared AS c USING (model, horizon, vintage, level)
""",
    "exceedances": """
WITH summary_groups AS MATERIALIZED (
    SELECT * FROM accuracy_groups
)
SELECT
    e.model, e.run_kind, e.cutoff, e.run_id, e.target_month, e.vintage, e.origin, e.destination,
    e.actual, e.mean, e.q500, e.q950,
    e.actual - e.q950 AS excess,
    e.actual / nullif(e.q950, 0) AS excess_ratio,
    row_number() OVER (
        PARTITION BY e.model, e.run_kind, e.cutoff, e.vintage
        ORDER BY e.actual - e.q950 DESC, e.origin, e.destination
    ) AS rank
FROM accuracy_exceedance_candidates AS e
SEMI JOIN accuracy_summary_runs_of('summary_groups') AS r ON r.run_id = e.run_id AND r.is_latest_run
""",
    "accuracy_by_horizon": """
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
LEFT JOIN (
WITH summary_groups AS MATERIALIZED (
    SELECT * FROM accuracy_groups
),
skill_runs AS MATERIALIZED (
    SELECT run_id, model FROM accuracy_summary_runs_of('summary_groups') WHERE is_skill_run
),
model_groups AS MATERIALIZED (
    SELECT g.model, g.horizon, g.vintage, g.level, g.n
    FROM summary_groups AS g
    SEMI JOIN skill_runs AS r ON r.run_id = g.run_id
),
compared AS (
    SELECT r.model, p.horizon, p.vintage, p.level,
           CAST(sum(p.n_common) AS BIGINT) AS n_common,
           sum(p.sum_wis) / nullif(sum(p.sum_wis_persistence), 0) AS relative_wis,
           sum(p.sum_abs_error) / nullif(sum(p.sum_abs_error_persistence), 0) AS relative_mae,
           sum(p.sum_wis) / sum(p.n_common) AS mean_wis,
           sum(p.sum_wis_persistence) / sum(p.n_common) AS persistence_mean_wis,
           sum(p.sum_abs_error) / sum(p.n_common) AS mae,
           sum(p.sum_abs_error_persistence) / sum(p.n_common) AS persistence_mae
    FROM accuracy_pairs AS p
    JOIN skill_runs AS r ON r.run_id = p.run_id
    SEMI JOIN skill_runs AS pr ON pr.run_id = p.persistence_run_id AND pr.model = 'persistence'
    GROUP BY r.model, p.horizon, p.vintage, p.level
),
model_counts AS (
    SELECT model, horizon, vintage, level, CAST(sum(n) AS BIGINT) AS n_model
    FROM model_groups GROUP BY model, horizon, vintage, level
),
persistence_counts AS (
    SELECT horizon, vintage, level, CAST(sum(n) AS BIGINT) AS n_persistence
    FROM model_groups WHERE model = 'persistence' GROUP BY horizon, vintage, level
)
SELECT
    mc.model, mc.horizon, mc.vintage, mc.level,
    mc.n_model,
    coalesce(pc.n_persistence, 0) AS n_persistence,
    coalesce(c.n_common, 0) AS n_common,
    c.relative_wis, c.relative_mae,
    c.mean_wis, c.persistence_mean_wis, c.mae, c.persistence_mae,
    (coalesce(c.n_common, 0) < mc.n_model OR coalesce(c.n_common, 0) < coalesce(pc.n_persistence, 0)) AS sets_differ,
    CASE
        WHEN coalesce(c.n_common, 0) = 0 THEN 'no target forecast by both this model and persistence'
        WHEN c.n_common < mc.n_model OR c.n_common < pc.n_persistence THEN
            'compared on ' || c.n_common || ' common targets (model scored ' || mc.n_model
            || ', persistence ' || pc.n_persistence || ')'
        ELSE NULL
    END AS note
FROM model_counts AS mc
LEFT JOIN persistence_counts AS pc USING (horizon, vintage, level)
LEFT JOIN compared AS c USING (model, horizon, vintage, level)
) AS s USING (model, horizon, vintage, level)
""",
    "accuracy_overview": """
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
GROUP BY g.model, g.cutoff, g.horizon, g.vintage, g.level
""",
}
