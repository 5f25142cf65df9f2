-- Layer 50 (accuracy). exceedances: the early-warning list. Dyads whose actual came in above the upper
-- (95 %) quantile of the one-month-ahead forecast (horizon 1), from accuracy_current (newest run per
-- cutoff, newest row per vintage). Read from accuracy_exceedance_candidates (sql/50_17), which keeps these
-- rows per run, not from the log.
-- Columns: model, run_kind, cutoff, run_id, target_month, vintage, origin, destination, actual, mean, q500,
--   q950, excess (actual - q950), excess_ratio (actual / q950; NULL when q950 = 0),
--   rank (1 = largest excess within model x run_kind x cutoff x vintage).
CREATE OR REPLACE VIEW exceedances AS
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
SEMI JOIN accuracy_summary_runs_of('summary_groups') AS r ON r.run_id = e.run_id AND r.is_latest_run;
