-- Layer 30 (panel). grid_listed(as_of, first_month, last_month): the arrivals the winning vintage of each
-- cell lists (flow_listed with pick 'latest'), for months first_month .. last_month, keyed by the dyad_index
-- of grid_dyads(as_of) and month_number = year * 12 + month - 1. Cells it does not list are implied zeros
-- (grid_cells says which cells are reported).
-- Columns: dyad_index, month_number, arrivals (DOUBLE).
CREATE OR REPLACE MACRO grid_listed(as_of, first_month, last_month) AS TABLE
SELECT d.dyad_index, CAST(year(l.month) * 12 + month(l.month) - 1 AS INTEGER) AS month_number,
       CAST(l.arrivals AS DOUBLE) AS arrivals
FROM flow_listed(as_of, 'latest') AS l
JOIN dyads_as_of(as_of) AS d USING (origin, destination)
WHERE l.month BETWEEN CAST(first_month AS DATE) AND CAST(last_month AS DATE);
