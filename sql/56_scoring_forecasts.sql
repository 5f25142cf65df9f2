-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_forecasts(run_ids, targets, vintages): the forecast rows
-- due for scoring, once per vintage. The three lists are read position by position as (run, target month,
-- vintage) triples (rows of scoring_due()); a run's rows for a target month come once per vintage listed.
-- Columns: vintage, forecast_rows columns, as_of, run_created_at (the run's as-of date and creation time).
CREATE OR REPLACE MACRO scoring_forecasts(run_ids, targets, vintages) AS TABLE
WITH due AS (
    SELECT unnest(run_ids) AS run_id, unnest(CAST(targets AS DATE[])) AS target_month, unnest(vintages) AS vintage
)
SELECT d.vintage, f.run_id, f.cutoff, f.model, f.run_kind, f.level, f.origin, f.destination, f.horizon,
       f.target_month, f.mean, f.q050, f.q250, f.q500, f.q750, f.q950, f.p_positive,
       r.as_of, r.created_at AS run_created_at
FROM forecast_rows AS f
JOIN due AS d ON d.run_id = f.run_id AND d.target_month = f.target_month
JOIN snapshot_runs AS r ON r.run_id = f.run_id
WHERE f.target_month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
  AND list_contains(run_ids, f.run_id);
