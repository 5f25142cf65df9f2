-- Layer 50 (accuracy). skill_vs_persistence: one row per model x horizon x vintage x level (pooled over
-- cutoffs), comparing each model with the persistence baseline only on the targets both forecast: same
-- cutoff, run kind, level, origin, destination, target month, horizon and the same actual (vintage and
-- actual_vintage_key). Rows come from accuracy_current (newest run per cutoff x model x run kind); each
-- cutoff counts once per model: its monthly run where there is one, else its backtest (the rule of
-- accuracy_overview), so a month that was both backtested and run live is not counted twice.
-- Computed from the per-group sums of accuracy_groups and the matched sums of accuracy_pairs (sql/50_15-16;
-- is_skill_run of accuracy_summary_runs is the run rule above), not from the log.
-- Columns:
--   model, horizon, vintage, level
--   n_model, n_persistence  targets each scored in this group
--   n_common                targets both scored (the only ones compared)
--   relative_wis            sum(WIS model) / sum(WIS persistence) on common targets; < 1 beats persistence
--   relative_mae            sum(|error| model) / sum(|error| persistence) on common targets
--   mean_wis, persistence_mean_wis, mae, persistence_mae   on common targets
--   sets_differ             true when either side scored targets the other did not
--   note                    plain-language warning when the sets differ or there is nothing to compare
-- Persistence itself appears with relative_wis = 1.
CREATE OR REPLACE VIEW skill_vs_persistence AS
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
LEFT JOIN compared AS c USING (model, horizon, vintage, level);
