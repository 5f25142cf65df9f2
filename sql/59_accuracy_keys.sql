-- Layer 50 (accuracy), used by dyadcast.scoring. accuracy_keys(targets, run_ids): the keys already in the
-- accuracy log for some runs and target months (a list of dates), so a rescore appends only rows not written before.
-- Columns: run_id, level, origin, destination, target_month, vintage, actual_vintage_key.
CREATE OR REPLACE MACRO accuracy_keys(targets, run_ids) AS TABLE
SELECT DISTINCT run_id, level, origin, destination, target_month, vintage, actual_vintage_key
FROM accuracy_rows
WHERE target_month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
  AND list_contains(CAST(targets AS DATE[]), target_month) AND list_contains(run_ids, run_id);
