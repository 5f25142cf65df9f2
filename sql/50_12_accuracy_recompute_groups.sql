-- Layer 50 (accuracy summaries). accuracy_recompute_groups: the groups (run_id, target_month, vintage) the
-- stored summaries do not cover yet (see accuracy_recompute_groups_of); empty, at no cost, when they are
-- current.
CREATE OR REPLACE VIEW accuracy_recompute_groups AS
SELECT * FROM accuracy_recompute_groups_of('accuracy_summary_batch_changes');
