-- Layer 30 (panel). origin_outflow_as_of(as_of, cutoff): each origin's monthly outflow (sum over the
-- destinations of the universe) on the panel months. Destinations not reporting that month are left out of
-- the sum; outflow is NULL when none reports.
-- Columns: origin, month, outflow, n_reported (dyads with a reported figure).
CREATE OR REPLACE MACRO origin_outflow_as_of(as_of, cutoff) AS TABLE
SELECT origin, month, CAST(sum(arrivals) AS DOUBLE) AS outflow, count(arrivals) AS n_reported
FROM panel_as_of(as_of, cutoff)
GROUP BY origin, month;
