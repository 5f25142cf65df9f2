-- Layer 50 (accuracy summaries). accuracy_groups: accuracy_group_stats as it would be after a refresh: the
-- stored rows of the groups still current plus those computed live from accuracy_recompute_rows for the
-- others. What the accuracy views read instead of the log.
CREATE OR REPLACE VIEW accuracy_groups AS
SELECT * FROM accuracy_stored_rows_of('accuracy_group_stats')
UNION ALL BY NAME
SELECT * FROM accuracy_group_stats_of('accuracy_recompute_rows');
