-- Layer 30 (panel). panel_as_of(as_of, cutoff): the dense dyad x month panel as known on date as_of, every
-- dyad of the universe for every panel month up to the cutoff. arrivals is NULL where no visible vintage
-- reports the (destination, month) (missing, not zero), 0 where the latest vintage reports the cell but
-- does not list the origin (implied zero); load_id / published_on name the vintage used.
-- Columns: origin, destination, dyad_index (see dyads_as_of), month, arrivals, load_id, published_on.
CREATE OR REPLACE MACRO panel_as_of(as_of, cutoff) AS TABLE
SELECT
    d.origin,
    d.destination,
    d.dyad_index,
    m.month,
    CASE WHEN c.load_id IS NOT NULL THEN CAST(coalesce(l.arrivals, 0) AS BIGINT) END AS arrivals,
    c.load_id,
    c.published_on
FROM dyads_as_of(as_of) AS d
CROSS JOIN panel_months(as_of, cutoff) AS m
LEFT JOIN flow_cells(as_of, 'latest') AS c ON c.destination = d.destination AND c.month = m.month
LEFT JOIN flow_listed(as_of, 'latest') AS l
    ON l.origin = d.origin AND l.destination = d.destination AND l.month = m.month;
