-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_scales(as_of, first_month, cutoff, run_ids): the MASE
-- denominator of each run and level, pooled over the series of the dyads the run forecast.
-- Hyndman & Koehler (2006) scale by the in-sample one-step naive MAE. The in-sample period is the one the run's
-- model could fit on: months first_month .. cutoff as published by as_of, where the caller passes
-- first_month = cutoff minus the training window and the horizon (dyadcast.cycle.prepare builds the training
-- frame from that month on). Earlier history is left out on purpose: the scale describes the period the
-- forecast learnt from, and computing it costs the same however long the history grows.
-- Series per level: every dyad in scope; origin, destination and world totals over the run's dyads, in a month
-- only when every dyad they sum was reported then. A pair is two consecutive months of one series; its step is
-- |y_t - y_{t-1}|. naive_scale = sum of steps / pairs, NULL when there is no pair or every step is 0 (MASE
-- undefined rather than infinite). dyadcast.scoring.naive_scales is the same computation on pandas frames.
-- Runs with the same set of dyads (the models of one cutoff, usually) share one computation.
-- Keys are integers after the first join (dyad, origin and destination numbers, months as year * 12 + month):
-- string keys made the pairing several times slower at 40,000 dyads.
-- Columns: run_id, level, naive_scale, n_pairs (one row per given run and level, also for runs without dyads).
CREATE OR REPLACE MACRO scoring_scales(as_of, first_month, cutoff, run_ids) AS TABLE
WITH scope AS (
    SELECT DISTINCT run_id, origin, destination FROM forecast_rows
    WHERE level = 'dyad' AND list_contains(run_ids, run_id)
),
shared AS (  -- each run's representative: the first run with the same set of dyads
    SELECT run_id, min(run_id) OVER (PARTITION BY dyad_set) AS rep
    FROM (SELECT run_id, md5(string_agg(origin || '>' || destination, '|' ORDER BY origin, destination)) AS dyad_set
          FROM scope GROUP BY run_id)
),
dyads AS MATERIALIZED (  -- numbered once: every reference must see the same numbers
    SELECT origin, destination, row_number() OVER (ORDER BY origin, destination) AS dyad,
           dense_rank() OVER (ORDER BY origin) AS o, dense_rank() OVER (ORDER BY destination) AS d
    FROM (SELECT DISTINCT origin, destination FROM scope)
),
members AS (
    SELECT list_position(run_ids, s.run_id) AS run, y.dyad, y.o, y.d
    FROM scope AS s
    JOIN dyads AS y ON y.origin = s.origin AND y.destination = s.destination
    SEMI JOIN shared AS h ON h.run_id = s.run_id AND h.rep = s.run_id
),
cells AS MATERIALIZED (
    SELECT m.run, m.dyad, m.o, m.d, year(h.month) * 12 + month(h.month) AS t, h.arrivals
    FROM actuals_as_of(CAST(as_of AS DATE)) AS h
    JOIN dyads AS y ON y.origin = h.origin AND y.destination = h.destination
    JOIN members AS m ON m.dyad = y.dyad
    WHERE h.month BETWEEN CAST(first_month AS DATE) AND CAST(cutoff AS DATE)
),
need AS (
    SELECT run, CASE WHEN grouping(o) = 0 THEN 1 WHEN grouping(d) = 0 THEN 2 ELSE 3 END AS level,
           coalesce(o, d, 0) AS key, count(*) AS n_cells
    FROM members
    GROUP BY GROUPING SETS ((run, o), (run, d), (run))
),
sums AS (
    SELECT run, t, CASE WHEN grouping(o) = 0 THEN 1 WHEN grouping(d) = 0 THEN 2 ELSE 3 END AS level,
           coalesce(o, d, 0) AS key, CAST(sum(arrivals) AS BIGINT) AS actual, count(*) AS n_reported
    FROM cells
    GROUP BY GROUPING SETS ((run, t, o), (run, t, d), (run, t))
),
series AS MATERIALIZED (  -- level 0 dyad, 1 origin total, 2 destination total, 3 world total
    SELECT run, 0 AS level, dyad AS key, t, arrivals AS actual FROM cells
    UNION ALL
    SELECT s.run, s.level, s.key, s.t, s.actual
    FROM sums AS s JOIN need AS n ON n.run = s.run AND n.level = s.level AND n.key = s.key
    WHERE s.n_reported = n.n_cells
),
pooled AS (
    SELECT s.run, s.level, sum(abs(s.actual - p.actual)) AS total, count(*) AS n_pairs
    FROM series AS s
    JOIN series AS p ON p.run = s.run AND p.level = s.level AND p.key = s.key AND p.t = s.t - 1
    GROUP BY s.run, s.level
)
SELECT r.run_id, l.level,
       CASE WHEN p.n_pairs > 0 AND p.total > 0 THEN CAST(p.total AS DOUBLE) / p.n_pairs END AS naive_scale,
       coalesce(p.n_pairs, 0) AS n_pairs
FROM (SELECT DISTINCT unnest(run_ids) AS run_id) AS r
LEFT JOIN shared AS h ON h.run_id = r.run_id
CROSS JOIN (VALUES (0, 'dyad'), (1, 'origin_total'), (2, 'destination_total'), (3, 'world_total')) AS l(code, level)
LEFT JOIN pooled AS p ON p.run = list_position(run_ids, h.rep) AND p.level = l.code;
