-- Layer 50 (accuracy summaries). accuracy_pairs: accuracy_pair_stats as it would be after a refresh (stored
-- rows of the groups still current plus the live computation of the others from accuracy_recompute_rows).
CREATE OR REPLACE VIEW accuracy_pairs AS
SELECT * FROM accuracy_stored_rows_of('accuracy_pair_stats')
UNION ALL BY NAME
SELECT * FROM accuracy_pair_stats_of('accuracy_recompute_rows');
