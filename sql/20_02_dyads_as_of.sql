-- Layer 20 (clean). dyads_as_of(as_of): the dyad universe on date as_of, i.e. every (origin, destination)
-- named by a visible flows row or dyad-attribute row. Implied zeros and the panel are built over it.
-- Columns: origin, destination, dyad_index (1..n in origin, destination order; an integer key for fast
--   window functions, not stable across as-of dates).
CREATE OR REPLACE MACRO dyads_as_of(as_of) AS TABLE
SELECT origin, destination, CAST(row_number() OVER (ORDER BY origin, destination) AS INTEGER) AS dyad_index
FROM (
    SELECT origin, destination FROM raw_flows WHERE published_on <= CAST(as_of AS DATE)
    UNION
    SELECT origin, destination FROM raw_dyad_attributes WHERE published_on <= CAST(as_of AS DATE)
);
