-- Layer 50 (accuracy summaries). accuracy_superseded_of(group_rows): the rows that the rule of
-- sql/50_accuracy_current.sql sets aside, among `group_rows`, the name of a relation shaped like
-- accuracy_group_rows_of (every row of some groups): for each run, level, origin, destination, target month
-- and vintage, every row but the newest (latest scored_at, then actual_published_on, actual_load_id,
-- actual_vintage_key). Most keys have one row; the key hash finds the repeated ones cheaply, and only those
-- are ranked on the key itself (two keys sharing a hash are told apart there, never merged).
-- Columns: row_id, run_id, target_month, vintage, scored_at
CREATE OR REPLACE MACRO accuracy_superseded_of(group_rows) AS TABLE
WITH repeated AS (
    SELECT key_hash FROM query_table(group_rows) GROUP BY key_hash HAVING count(*) > 1
)
SELECT k.row_id, k.run_id, k.target_month, k.vintage, k.scored_at
FROM query_table(group_rows) AS k
SEMI JOIN repeated AS r ON r.key_hash = k.key_hash
QUALIFY row_number() OVER (
    PARTITION BY k.run_id, k.level, k.origin, k.destination, k.target_month, k.vintage
    ORDER BY k.scored_at DESC, k.actual_published_on DESC, k.actual_load_id DESC, k.actual_vintage_key DESC
) > 1;
