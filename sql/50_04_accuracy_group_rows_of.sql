-- Layer 50 (accuracy summaries). accuracy_group_rows_of(groups): the keys of every row of accuracy_rows in the
-- groups listed by the relation named `groups` (run_id, target_month, vintage): its rowid, the key of
-- sql/50_accuracy_current.sql and its hash, and the columns that order its scorings. The one read of the
-- log that touches old rows of every group being recomputed (they may lie anywhere in the log, so callers
-- materialize it); accuracy_superseded_of and accuracy_older_rows_of work from it.
-- Columns: row_id (the rowid in accuracy_rows; valid within the query or transaction that reads it),
--   run_id, target_month, vintage, level, origin, destination, scored_at, actual_published_on,
--   actual_load_id, actual_vintage_key, key_hash
CREATE OR REPLACE MACRO accuracy_group_rows_of(groups) AS TABLE
SELECT
    a.rowid AS row_id, a.run_id, a.target_month, a.vintage, a.level, a.origin, a.destination,
    a.scored_at, a.actual_published_on, a.actual_load_id, a.actual_vintage_key,
    hash(a.run_id, a.level, a.origin, a.destination, a.target_month, a.vintage) AS key_hash
FROM accuracy_rows AS a
SEMI JOIN (SELECT DISTINCT run_id, target_month, vintage FROM query_table(groups)) AS g
    ON g.run_id = a.run_id AND g.target_month = a.target_month AND g.vintage = a.vintage;
