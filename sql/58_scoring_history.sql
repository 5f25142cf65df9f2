-- Layer 50 (accuracy), used by dyadcast.scoring. scoring_history(as_of, cutoff, run_ids): the arrivals the
-- given runs could see (latest revision published by as_of, months up to the cutoff) on the dyads they
-- forecast; the MASE scale is computed from it.
-- Columns: origin, destination, month, arrivals.
CREATE OR REPLACE MACRO scoring_history(as_of, cutoff, run_ids) AS TABLE
SELECT h.origin, h.destination, h.month, h.arrivals
FROM actuals_as_of(CAST(as_of AS DATE)) AS h
SEMI JOIN (
    SELECT DISTINCT origin, destination FROM forecast_rows
    WHERE level = 'dyad' AND list_contains(run_ids, run_id)
) AS s ON s.origin = h.origin AND s.destination = h.destination
WHERE h.month <= CAST(cutoff AS DATE);
