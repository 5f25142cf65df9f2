"""The accuracy views as they were first written (before the summaries, commit 09871df): plain aggregates over
every row of the log, through the views accuracy_current and accuracy_log, which still read the whole log and
do not touch the summaries. The tests use them as the oracle for the views that now read the summaries
(sql/50_*, 51-54, 63): same rows, same numbers. accuracy_by_horizon joins the full-log skill_vs_persistence
below, not the view of that name.
"""

from __future__ import annotations

# Each cutoff once per model: the newest runs of its first run kind, monthly first.
SKILL_ROWS = """
    SELECT * FROM accuracy_current
    QUALIFY dense_rank() OVER (PARTITION BY cutoff, model ORDER BY (run_kind = 'monthly') DESC) = 1
"""

SKILL_VS_PERSISTENCE = f"""
WITH model_rows AS ({SKILL_ROWS}),
persistence_rows AS (
    SELECT * FROM model_rows WHERE model = 'persistence'
),
common AS (
    SELECT m.model, m.horizon, m.vintage, m.level,
           m.wis AS wis_m, p.wis AS wis_p, m.abs_error AS ae_m, p.abs_error AS ae_p
    FROM model_rows AS m
    JOIN persistence_rows AS p
      ON  p.cutoff = m.cutoff AND p.run_kind = m.run_kind AND p.level = m.level
      AND p.origin = m.origin AND p.destination = m.destination AND p.target_month = m.target_month
      AND p.horizon = m.horizon AND p.vintage = m.vintage AND p.actual_vintage_key = m.actual_vintage_key
),
compared AS (
    SELECT model, horizon, vintage, level,
           count(*) AS n_common,
           sum(wis_m) / nullif(sum(wis_p), 0) AS relative_wis,
           sum(ae_m) / nullif(sum(ae_p), 0) AS relative_mae,
           avg(wis_m) AS mean_wis, avg(wis_p) AS persistence_mean_wis,
           avg(ae_m) AS mae, avg(ae_p) AS persistence_mae
    FROM common
    GROUP BY model, horizon, vintage, level
),
model_counts AS (
    SELECT model, horizon, vintage, level, count(*) AS n_model
    FROM model_rows GROUP BY model, horizon, vintage, level
),
persistence_counts AS (
    SELECT horizon, vintage, level, count(*) AS n_persistence
    FROM persistence_rows GROUP BY horizon, vintage, level
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
"""

FULL_LOG = {
    "accuracy_summary": """
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
GROUP BY model, run_kind, horizon, cutoff, vintage, level
""",
    "skill_vs_persistence": SKILL_VS_PERSISTENCE,
    "exceedances": """
SELECT
    model, run_kind, cutoff, run_id, target_month, vintage, origin, destination,
    actual, mean, q500, q950,
    actual - q950 AS excess,
    actual / nullif(q950, 0) AS excess_ratio,
    row_number() OVER (
        PARTITION BY model, run_kind, cutoff, vintage
        ORDER BY actual - q950 DESC, origin, destination
    ) AS rank
FROM accuracy_current
WHERE level = 'dyad' AND horizon = 1 AND exceeded
""",
    "accuracy_by_horizon": f"""
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
    FROM ({SKILL_ROWS})
    GROUP BY model, horizon, vintage, level
)
SELECT p.*, s.relative_wis, s.relative_mae, s.n_common, s.note
FROM pooled AS p
LEFT JOIN ({SKILL_VS_PERSISTENCE}) AS s USING (model, horizon, vintage, level)
""",
    "accuracy_overview": """
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
GROUP BY model, cutoff, horizon, vintage, level
""",
}
