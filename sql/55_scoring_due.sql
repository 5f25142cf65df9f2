-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_due(): the (run, target month, vintage) triples
-- whose actuals changed since they were last scored, or were never scored.
-- A month's fingerprint is the md5 of the sorted set of vintages (load_id@published_on) its reported
-- (destination, month) cells come from, read from flow_cells over all loads: the same cells the views
-- actuals_first_release ('first') and actuals_latest ('latest') are built on, without expanding the implied
-- zeros. A new destination reported, a revision or a backfill changes it.
-- Columns: run_id, target_month, vintage ('first_release' | 'latest'), fingerprint, n_rows (forecast rows of
--   the run for that month, to size the work).
CREATE OR REPLACE MACRO scoring_due() AS TABLE
WITH targets AS (
    SELECT run_id, target_month, count(*) AS n_rows FROM forecast_rows GROUP BY run_id, target_month
),
months AS (
    SELECT DISTINCT target_month AS month FROM targets
),
cells AS (
    SELECT DISTINCT 'first_release' AS vintage, c.month, c.load_id, c.published_on
    FROM flow_cells(DATE '9999-12-31', 'first') AS c SEMI JOIN months AS m ON c.month = m.month
    UNION ALL
    SELECT DISTINCT 'latest' AS vintage, c.month, c.load_id, c.published_on
    FROM flow_cells(DATE '9999-12-31', 'latest') AS c SEMI JOIN months AS m ON c.month = m.month
),
fingerprints AS (
    SELECT vintage, month,
           md5(string_agg(CAST(load_id AS VARCHAR) || '@' || strftime(published_on, '%Y-%m-%d'), '+'
                          ORDER BY load_id, published_on)) AS fingerprint
    FROM cells
    GROUP BY vintage, month
)
SELECT t.run_id, t.target_month, f.vintage, f.fingerprint, t.n_rows
FROM targets AS t
JOIN fingerprints AS f ON f.month = t.target_month
LEFT JOIN scoring_checks AS c
    ON c.run_id = t.run_id AND c.target_month = t.target_month AND c.vintage = f.vintage
WHERE c.fingerprint IS DISTINCT FROM f.fingerprint;
