-- Layer 30 (panel). grid_dyads(as_of): the dyad universe on date as_of (see dyads_as_of) in dyad_index order,
-- with the latest visible dyad attributes already transformed as the features use them. One row per dyad:
-- the rows of the dyad x month grid that dyadcast.grid builds in memory (the feature build's fast path).
-- Columns: dyad_index, origin, destination, log_distance (ln km, NULL unless > 0), contiguous,
--   common_language, colonial_tie (0/1 as DOUBLE), log_diaspora (ln(1 + diaspora), NULL when negative).
CREATE OR REPLACE MACRO grid_dyads(as_of) AS TABLE
SELECT d.dyad_index, d.origin, d.destination,
       CASE WHEN a.distance_km > 0 THEN ln(a.distance_km) END AS log_distance,
       CAST(a.contiguous AS DOUBLE) AS contiguous,
       CAST(a.common_language AS DOUBLE) AS common_language,
       CAST(a.colonial_tie AS DOUBLE) AS colonial_tie,
       CASE WHEN a.diaspora >= 0 THEN ln(1 + a.diaspora) END AS log_diaspora
FROM dyads_as_of(as_of) AS d
LEFT JOIN dyad_attributes_as_of(as_of) AS a USING (origin, destination)
ORDER BY d.dyad_index;
