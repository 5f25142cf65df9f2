-- Layer 50 (accuracy summaries). accuracy_stored_rows_of(summary): the rows of the stored summary table named
-- `summary` (one of sql/06_schema_accuracy_summaries.sql) whose group (run_id, target_month, vintage) is not
-- in accuracy_recompute_groups, i.e. still current. With the live rows of accuracy_recompute_rows, the table
-- as it would be after a refresh. While the summaries are current: the whole table, nothing of the log read.
-- Columns: those of `summary`
CREATE OR REPLACE MACRO accuracy_stored_rows_of(summary) AS TABLE
SELECT s.*
FROM query_table(summary) AS s
ANTI JOIN accuracy_recompute_groups AS r
    ON r.run_id = s.run_id AND r.target_month = s.target_month AND r.vintage = s.vintage;
