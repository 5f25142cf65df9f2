-- Analyst view `data_freshness`: how current each kind of input file is. One row per file kind, also
-- for kinds never loaded (their period and counts are NULL / 0).
--
-- Columns
--   kind                 'flows', 'origin_indicators', 'destination_indicators', 'signals', 'dyad_attributes'
--   latest_period        DATE: newest month (flows, indicators) or day (signals) loaded; NULL for
--                        dyad_attributes, which have no period
--   latest_published_on  DATE: newest publication date among the loaded rows
--   files_loaded         files of this kind accepted (table loads)
--   rows_loaded          rows in those files
--   last_loaded_at       TIMESTAMP of the most recent accepted file
--   files_rejected       files of this kind moved to quarantine (table rejected_files)
--   last_rejected_at     TIMESTAMP of the most recent rejection
CREATE OR REPLACE VIEW data_freshness AS
WITH periods AS (
    SELECT 1 AS position, 'flows' AS kind, max(month) AS latest_period, max(published_on) AS latest_published_on
    FROM raw_flows
    UNION ALL
    SELECT 2, 'origin_indicators', max(month), max(published_on) FROM raw_origin_indicators
    UNION ALL
    SELECT 3, 'destination_indicators', max(month), max(published_on) FROM raw_destination_indicators
    UNION ALL
    SELECT 4, 'signals', max(date), max(published_on) FROM raw_signals
    UNION ALL
    SELECT 5, 'dyad_attributes', CAST(NULL AS DATE), max(published_on) FROM raw_dyad_attributes
),
files AS (
    SELECT kind, count(*) AS files_loaded, CAST(sum(row_count) AS BIGINT) AS rows_loaded,
           max(loaded_at) AS last_loaded_at
    FROM loads
    GROUP BY kind
),
rejected AS (
    SELECT kind, count(*) AS files_rejected, max(rejected_at) AS last_rejected_at
    FROM rejected_files
    GROUP BY kind
)
SELECT
    p.kind,
    p.latest_period,
    p.latest_published_on,
    coalesce(f.files_loaded, 0) AS files_loaded,
    coalesce(f.rows_loaded, 0) AS rows_loaded,
    f.last_loaded_at,
    coalesce(r.files_rejected, 0) AS files_rejected,
    r.last_rejected_at
FROM periods AS p
LEFT JOIN files AS f USING (kind)
LEFT JOIN rejected AS r USING (kind)
ORDER BY p.position;
