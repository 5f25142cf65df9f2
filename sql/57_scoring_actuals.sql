-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_actuals(targets): both vintages of the actuals of the
-- given months (a list of dates) (implied zeros included, as in the layer-20 views).
-- Columns: vintage ('first_release' | 'latest'), origin, destination, month, arrivals, load_id, published_on.
CREATE OR REPLACE MACRO scoring_actuals(targets) AS TABLE
SELECT 'first_release' AS vintage, origin, destination, month, arrivals, load_id, published_on
FROM actuals_first_release
WHERE month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
  AND list_contains(CAST(targets AS DATE[]), month)
UNION ALL
SELECT 'latest' AS vintage, origin, destination, month, arrivals, load_id, published_on
FROM actuals_latest
WHERE month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
  AND list_contains(CAST(targets AS DATE[]), month);
