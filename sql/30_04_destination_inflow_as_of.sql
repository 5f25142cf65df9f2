-- Layer 30 (panel). destination_inflow_as_of(as_of, cutoff): each destination's monthly inflow (sum over
-- the origins of the universe) on the panel months; NULL when the (destination, month) is not reported.
-- Columns: destination, month, inflow, n_reported (dyads with a reported figure).
CREATE OR REPLACE MACRO destination_inflow_as_of(as_of, cutoff) AS TABLE
SELECT destination, month, CAST(sum(arrivals) AS DOUBLE) AS inflow, count(arrivals) AS n_reported
FROM panel_as_of(as_of, cutoff)
GROUP BY destination, month;
