-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_forecasts(targets, run_ids): the forecast rows of
-- the given runs for the given target months (a list of dates), with the run's as-of date and creation time.
-- Columns: forecast_rows columns + as_of, run_created_at.
CREATE OR REPLACE MACRO scoring_forecasts(targets, run_ids) AS TABLE
SELECT f.run_id, f.cutoff, f.model, f.run_kind, f.level, f.origin, f.destination, f.horizon, f.target_month,
       f.mean, f.q050, f.q250, f.q500, f.q750, f.q950, f.p_positive,
       r.as_of, r.created_at AS run_created_at
FROM forecast_rows AS f
JOIN snapshot_runs AS r ON r.run_id = f.run_id
WHERE f.target_month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
  AND list_contains(CAST(targets AS DATE[]), f.target_month) AND list_contains(run_ids, f.run_id);
