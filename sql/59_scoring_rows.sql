-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_rows(run_ids, targets, vintages): the forecast rows of
-- the due (run, target month, vintage) triples (see scoring_forecasts) that can be scored, with their actual,
-- its vintage and the run's MASE scale, minus the rows whose key is already in the accuracy log (so a rescore
-- appends nothing twice). Total rows that must wait are returned too, with complete = FALSE.
-- A dyad is scored when its (destination, month) is reported in the vintage; a dyad the vintage does not list
-- had zero arrivals. A total (origin, destination, world) is the sum over the dyads the same run forecast for
-- that target month, scored only when every one of them is reported; its vintage key is the sorted,
-- '+'-joined set of its dyads' keys (md5:<hex> of it past 120 characters), its load and publication date the
-- highest among them. dyadcast.scoring.score_frame is the same rule on pandas frames; the measures
-- themselves are computed in Python (dyadcast.scoring.metrics) from these columns.
-- Columns: run_id, cutoff, model, run_kind, as_of, run_created_at, level, origin, destination, horizon,
--   target_month, vintage, actual_vintage_key, actual_load_id, actual_published_on, n_cells, actual, mean,
--   q050 .. q950, p_positive, naive_scale, complete.
CREATE OR REPLACE MACRO scoring_rows(run_ids, targets, vintages) AS TABLE
WITH fc AS MATERIALIZED (
    SELECT * FROM scoring_forecasts(run_ids, targets, vintages)
),
listed AS MATERIALIZED (
    SELECT * FROM scoring_actuals(targets)
),
cells AS (
    SELECT DISTINCT vintage, destination, month, load_id, published_on,
           CAST(load_id AS VARCHAR) || '@' || strftime(published_on, '%Y-%m-%d') AS vintage_key
    FROM listed
),
dyads AS NOT MATERIALIZED (  -- every dyad forecast due; actual and vintage NULL where its cell is not reported
    SELECT f.*, c.vintage_key AS actual_vintage_key, c.load_id AS actual_load_id,
           c.published_on AS actual_published_on,
           CASE WHEN c.vintage_key IS NOT NULL THEN CAST(coalesce(l.arrivals, 0) AS DOUBLE) END AS actual
    FROM fc AS f
    LEFT JOIN cells AS c ON c.vintage = f.vintage AND c.destination = f.destination AND c.month = f.target_month
    LEFT JOIN listed AS l ON l.vintage = f.vintage AND l.origin = f.origin AND l.destination = f.destination
        AND l.month = f.target_month
    WHERE f.level = 'dyad'
),
sums AS (
    SELECT run_id, vintage, target_month,
           CASE WHEN grouping(origin) = 0 THEN 'origin_total'
                WHEN grouping(destination) = 0 THEN 'destination_total' ELSE 'world_total' END AS level,
           coalesce(origin, '*') AS origin, coalesce(destination, '*') AS destination,
           count(*) AS n_cells, count(actual) AS n_reported, sum(actual) AS actual,
           max(actual_load_id) AS actual_load_id, max(actual_published_on) AS actual_published_on,
           string_agg(DISTINCT actual_vintage_key, '+' ORDER BY actual_vintage_key) AS key_set
    FROM dyads
    GROUP BY GROUPING SETS ((run_id, vintage, target_month, origin), (run_id, vintage, target_month, destination),
                            (run_id, vintage, target_month))
),
scored AS (
    SELECT run_id, cutoff, model, run_kind, as_of, run_created_at, level, origin, destination, horizon,
           target_month, vintage, actual_vintage_key, actual_load_id, actual_published_on, 1 AS n_cells, actual,
           mean, q050, q250, q500, q750, q950, p_positive, TRUE AS complete
    FROM dyads
    WHERE actual IS NOT NULL
    UNION ALL
    SELECT f.run_id, f.cutoff, f.model, f.run_kind, f.as_of, f.run_created_at, f.level, f.origin, f.destination,
           f.horizon, f.target_month, f.vintage,
           CASE WHEN length(s.key_set) <= 120 THEN s.key_set ELSE 'md5:' || md5(s.key_set) END,
           s.actual_load_id, s.actual_published_on, s.n_cells, s.actual,
           f.mean, f.q050, f.q250, f.q500, f.q750, f.q950, f.p_positive,
           coalesce(s.n_reported = s.n_cells, FALSE) AS complete
    FROM fc AS f
    LEFT JOIN sums AS s ON s.run_id = f.run_id AND s.vintage = f.vintage AND s.target_month = f.target_month
        AND s.level = f.level AND s.origin = f.origin AND s.destination = f.destination
    WHERE f.level <> 'dyad'
),
logged AS (
    SELECT run_id, level, origin, destination, target_month, vintage, actual_vintage_key
    FROM accuracy_rows
    WHERE target_month BETWEEN list_min(CAST(targets AS DATE[])) AND list_max(CAST(targets AS DATE[]))
      AND list_contains(CAST(targets AS DATE[]), target_month) AND list_contains(run_ids, run_id)
)
SELECT r.run_id, r.cutoff, r.model, r.run_kind, r.as_of, r.run_created_at, r.level, r.origin, r.destination,
       r.horizon, r.target_month, r.vintage, r.actual_vintage_key, r.actual_load_id, r.actual_published_on,
       CAST(r.n_cells AS INTEGER) AS n_cells, CAST(r.actual AS DOUBLE) AS actual, r.mean,
       r.q050, r.q250, r.q500, r.q750, r.q950, r.p_positive, n.naive_scale, r.complete
FROM scored AS r
LEFT JOIN run_naive_scales AS n ON n.run_id = r.run_id AND n.level = r.level
ANTI JOIN logged AS k ON k.run_id = r.run_id AND k.level = r.level AND k.origin = r.origin
    AND k.destination = r.destination AND k.target_month = r.target_month AND k.vintage = r.vintage
    AND k.actual_vintage_key = r.actual_vintage_key;
