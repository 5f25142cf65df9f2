-- Layer 50 (accuracy summaries). accuracy_exceedance_rows_of(current_rows): rows of accuracy_exceedance_rows
-- (dyads, horizon 1, actual above q950) from the relation named `current_rows`.
CREATE OR REPLACE MACRO accuracy_exceedance_rows_of(current_rows) AS TABLE
SELECT run_id, cutoff, model, run_kind, run_created_at, target_month, vintage, origin, destination,
       actual, mean, q500, q950
FROM query_table(current_rows)
WHERE level = 'dyad' AND horizon = 1 AND exceeded;
