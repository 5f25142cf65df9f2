-- Layer 20 (clean). flow_actuals(as_of, pick): arrivals per dyad and reported (destination, month) as
-- visible on date as_of, from one vintage per cell (pick = 'latest' or 'first', see flow_cells). Every dyad
-- of the universe whose destination the vintage reports gets a row; origins the vintage does not list had
-- zero arrivals (implied zero). Cells no vintage reports have no row (missing).
-- Columns: origin, destination, month, arrivals, load_id, published_on (of the vintage used).
CREATE OR REPLACE MACRO flow_actuals(as_of, pick) AS TABLE
SELECT
    d.origin,
    c.destination,
    c.month,
    CAST(coalesce(l.arrivals, 0) AS BIGINT) AS arrivals,
    c.load_id,
    c.published_on
FROM flow_cells(as_of, pick) AS c
JOIN dyads_as_of(as_of) AS d ON d.destination = c.destination
LEFT JOIN flow_listed(as_of, pick) AS l ON l.origin = d.origin AND l.destination = c.destination AND l.month = c.month;
