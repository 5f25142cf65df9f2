-- Layer 50 (accuracy summaries). accuracy_exceedance_candidates: accuracy_exceedance_rows as it would be
-- after a refresh (stored rows of the current groups plus the live computation of the others), every run.
-- While the summaries are current, accuracy_recompute_groups is empty and the live part reads nothing.
CREATE OR REPLACE VIEW accuracy_exceedance_candidates AS
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
),
current_rows AS (
    SELECT * FROM accuracy_current_rows_of('recompute', 'superseded', 'older_rows', (SELECT t FROM since))
)
SELECT s.*
FROM accuracy_exceedance_rows AS s
ANTI JOIN recompute AS r ON r.run_id = s.run_id AND r.target_month = s.target_month AND r.vintage = s.vintage
UNION ALL BY NAME
SELECT * FROM accuracy_exceedance_rows_of('current_rows');
