-- Layer 50 (accuracy). skill_vs_persistence: one row per model x horizon x vintage x level (pooled over
-- cutoffs), comparing each model with the persistence baseline only on the targets both forecast: same
-- cutoff, run kind, level, origin, destination, target month, horizon and the same actual (vintage and
-- actual_vintage_key). Rows come from accuracy_current (newest run per cutoff x model x run kind); each
-- cutoff counts once per model: its monthly run where there is one, else its backtest (the rule of
-- accuracy_overview), so a month that was both backtested and run live is not counted twice.
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
WITH model_rows AS (
    SELECT * FROM accuracy_current
    QUALIFY dense_rank() OVER (PARTITION BY cutoff, model ORDER BY (run_kind = 'monthly') DESC) = 1
),
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
LEFT JOIN compared AS c USING (model, horizon, vintage, level);
