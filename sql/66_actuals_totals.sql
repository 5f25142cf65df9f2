-- Analyst view `actuals_totals`: reported arrivals summed to the same levels as the forecast totals, for
-- both vintages, so a total forecast can be set beside what happened. Built on the views
-- actuals_first_release and actuals_latest (layer 20), which already include implied zeros.
--
-- Columns
--   vintage                'first_release' (as first published) or 'latest' (after every revision so far)
--   level                  'origin_total', 'destination_total' or 'world_total'
--   origin                 origin country code; '*' for destination and world totals
--   destination            destination country code; '*' for origin and world totals
--   month                  DATE (first of month)
--   arrivals               sum of reported arrivals
--   destinations_reported  how many destinations reported that month for this total; a total over fewer
--                          destinations than usual is incomplete, not low
CREATE OR REPLACE VIEW actuals_totals AS
WITH both_vintages AS (
    SELECT 'first_release' AS vintage, origin, destination, month, arrivals FROM actuals_first_release
    UNION ALL
    SELECT 'latest' AS vintage, origin, destination, month, arrivals FROM actuals_latest
)
SELECT vintage, 'origin_total' AS level, origin, '*' AS destination, month,
       CAST(sum(arrivals) AS BIGINT) AS arrivals, count(DISTINCT destination) AS destinations_reported
FROM both_vintages
GROUP BY vintage, origin, month
UNION ALL
SELECT vintage, 'destination_total', '*', destination, month,
       CAST(sum(arrivals) AS BIGINT), count(DISTINCT destination)
FROM both_vintages
GROUP BY vintage, destination, month
UNION ALL
SELECT vintage, 'world_total', '*', '*', month,
       CAST(sum(arrivals) AS BIGINT), count(DISTINCT destination)
FROM both_vintages
GROUP BY vintage, month;
