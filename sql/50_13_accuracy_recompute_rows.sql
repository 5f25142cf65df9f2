-- Layer 50 (accuracy summaries). accuracy_recompute_rows: the current rows (the rule of
-- sql/50_accuracy_current.sql within a run) of the groups the stored summaries do not cover yet
-- (accuracy_recompute_groups), computed live from the log with the macros refresh_summaries runs
-- (sql/50_04-50_07). The live part of accuracy_groups, accuracy_pairs, accuracy_exceedance_candidates and
-- accuracy_surprise_candidates; empty, reading nothing, while the summaries are current.
-- Columns: those of accuracy_current_rows_of
CREATE OR REPLACE VIEW accuracy_recompute_rows AS
WITH recompute AS MATERIALIZED (
    SELECT * FROM accuracy_recompute_groups
),
group_rows AS MATERIALIZED (
    SELECT * FROM accuracy_group_rows_of('recompute')
),
superseded AS MATERIALIZED (
    SELECT * FROM accuracy_superseded_of('group_rows')
),
since AS MATERIALIZED (
    SELECT coalesce(min(first_scored_at), TIMESTAMP 'infinity') AS t
    FROM accuracy_summary_batch_changes WHERE change = 'new'
),
older_rows AS MATERIALIZED (
    SELECT * FROM accuracy_older_rows_of('group_rows', 'superseded', (SELECT t FROM since))
)
SELECT * FROM accuracy_current_rows_of('recompute', 'superseded', 'older_rows', (SELECT t FROM since));
