-- Layer 50 (accuracy summaries). accuracy_exceedance_candidates: accuracy_exceedance_rows as it would be
-- after a refresh (stored rows of the groups still current plus the live computation of the others from
-- accuracy_recompute_rows), every run.
CREATE OR REPLACE VIEW accuracy_exceedance_candidates AS
SELECT * FROM accuracy_stored_rows_of('accuracy_exceedance_rows')
UNION ALL BY NAME
SELECT * FROM accuracy_exceedance_rows_of('accuracy_recompute_rows');
