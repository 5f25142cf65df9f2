-- Layer 50 (accuracy summaries). accuracy_recompute_groups_of(changes): the groups (run_id, target_month,
-- vintage) whose summaries must be computed again, given `changes`, the name of a relation shaped like
-- accuracy_summary_batch_changes. Every group with rows in a new batch, widened to all groups of the same
-- target month and vintage (skill_vs_persistence pairs each run with the persistence run of its cutoff, so
-- both sides are recomputed together). When a summarised batch is gone (the log was rebuilt differently or
-- edited), every group is: those of the log and those summarised.
-- Columns: run_id, target_month, vintage
CREATE OR REPLACE MACRO accuracy_recompute_groups_of(changes) AS TABLE
WITH listed_changes AS MATERIALIZED (
    SELECT change, batch_id FROM query_table(changes)
),
new_batches AS (
    SELECT batch_id FROM listed_changes WHERE change = 'new'
),
reset AS (
    SELECT 1 AS yes FROM listed_changes WHERE change = 'gone' LIMIT 1
),
touched AS MATERIALIZED (
    SELECT DISTINCT a.run_id, a.target_month, a.vintage
    FROM accuracy_rows AS a
    SEMI JOIN new_batches AS b ON a.batch_id = b.batch_id
),
known AS (
    SELECT DISTINCT run_id, target_month, vintage FROM accuracy_group_stats
)
SELECT run_id, target_month, vintage FROM touched
UNION
SELECT k.run_id, k.target_month, k.vintage
FROM known AS k
SEMI JOIN touched AS t ON t.target_month = k.target_month AND t.vintage = k.vintage
UNION
SELECT a.run_id, a.target_month, a.vintage
FROM accuracy_rows AS a
SEMI JOIN reset ON reset.yes = 1
UNION
SELECT k.run_id, k.target_month, k.vintage
FROM known AS k
SEMI JOIN reset ON reset.yes = 1;
