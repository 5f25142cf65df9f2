-- Layer 20 (clean). flow_vintages_as_of(as_of): every flows vintage visible on date as_of, one row per
-- (destination, month) it reports. A vintage is the rows of one (load_id, published_on); it is complete for
-- each (destination, month) it mentions.
-- Columns: destination, month, load_id, published_on, n_rows (rows the vintage lists for that cell),
--   recency (1 = the vintage that wins: latest published_on, then highest load_id),
--   release_number (1 = first release: earliest published_on, then lowest load_id).
CREATE OR REPLACE MACRO flow_vintages_as_of(as_of) AS TABLE
SELECT
    destination,
    month,
    load_id,
    published_on,
    n_rows,
    row_number() OVER (PARTITION BY destination, month ORDER BY published_on DESC, load_id DESC) AS recency,
    row_number() OVER (PARTITION BY destination, month ORDER BY published_on, load_id) AS release_number
FROM (
    SELECT destination, month, load_id, published_on, count(*) AS n_rows
    FROM raw_flows
    WHERE published_on <= CAST(as_of AS DATE)
    GROUP BY destination, month, load_id, published_on
);
