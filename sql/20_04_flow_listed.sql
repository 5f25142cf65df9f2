-- Layer 20 (clean). flow_listed(as_of, pick): the rows the chosen vintage of each cell lists (see
-- flow_cells). Origins a vintage does not list had zero arrivals; flow_actuals adds those zeros.
-- Keys are unique within a load (ingest rejects duplicates); the sum only guarantees one row per key.
-- Columns: origin, destination, month, arrivals, load_id, published_on.
CREATE OR REPLACE MACRO flow_listed(as_of, pick) AS TABLE
SELECT r.origin, r.destination, r.month, sum(r.arrivals) AS arrivals, r.load_id, r.published_on
FROM raw_flows AS r
SEMI JOIN flow_cells(as_of, pick) AS c USING (destination, month, load_id, published_on)
GROUP BY r.origin, r.destination, r.month, r.load_id, r.published_on;
