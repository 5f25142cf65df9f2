-- Layer 20 (clean). dyad_attributes_as_of(as_of): the latest visible attribute row of every dyad on date
-- as_of (latest published_on, then highest load_id).
-- Columns: origin, destination, distance_km, contiguous, common_language, colonial_tie, diaspora, load_id,
--   published_on.
CREATE OR REPLACE MACRO dyad_attributes_as_of(as_of) AS TABLE
SELECT origin, destination, distance_km, contiguous, common_language, colonial_tie, diaspora, load_id, published_on
FROM raw_dyad_attributes
WHERE published_on <= CAST(as_of AS DATE)
QUALIFY row_number() OVER (PARTITION BY origin, destination ORDER BY published_on DESC, load_id DESC) = 1;
