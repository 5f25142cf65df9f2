-- Layer 50 (accuracy). exceedances: the early-warning list. Dyads whose actual came in above the upper
-- (95 %) quantile of the one-month-ahead forecast (horizon 1), from accuracy_current (newest run per
-- cutoff, newest row per vintage).
-- Columns: model, run_kind, cutoff, run_id, target_month, vintage, origin, destination, actual, mean, q500,
--   q950, excess (actual - q950), excess_ratio (actual / q950; NULL when q950 = 0),
--   rank (1 = largest excess within model x run_kind x cutoff x vintage).
CREATE OR REPLACE VIEW exceedances AS
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
WHERE level = 'dyad' AND horizon = 1 AND exceeded;
