-- Layer 50 (accuracy summaries). accuracy_surprise_candidates: accuracy_surprise_rows as it would be after a
-- refresh (stored rows of the groups still current plus the live computation of the others from
-- accuracy_recompute_rows), every run.
CREATE OR REPLACE VIEW accuracy_surprise_candidates AS
SELECT * FROM accuracy_stored_rows_of('accuracy_surprise_rows')
UNION ALL BY NAME
SELECT * FROM accuracy_surprise_rows_of('accuracy_recompute_rows');
