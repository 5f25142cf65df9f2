-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_actuals(targets): for the given months (a list of dates),
-- the rows listed by the vintage of each reported (destination, month), once as first release and once as
-- latest revision (flow_listed over all loads). Implied zeros are not expanded: a dyad whose destination-month
-- is reported but which is not listed had zero arrivals, and scoring_rows adds that zero only for the dyads a
-- run forecast, instead of for the whole dyad universe. Every reported cell has at least one listed row (a
-- vintage exists only through its rows), so the reported cells are the distinct (vintage, destination, month,
-- load_id, published_on) of this macro.
-- Columns: vintage ('first_release' | 'latest'), origin, destination, month, arrivals, load_id, published_on.
CREATE OR REPLACE MACRO scoring_actuals(targets) AS TABLE
SELECT 'first_release' AS vintage, origin, destination, month, arrivals, load_id, published_on
FROM flow_listed(DATE '9999-12-31', 'first')
WHERE month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
  AND list_contains(CAST(targets AS DATE[]), month)
UNION ALL
SELECT 'latest' AS vintage, origin, destination, month, arrivals, load_id, published_on
FROM flow_listed(DATE '9999-12-31', 'latest')
WHERE month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
  AND list_contains(CAST(targets AS DATE[]), month);
