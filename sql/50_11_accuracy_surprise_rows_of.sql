-- Layer 50 (accuracy summaries). accuracy_surprise_rows_of(current_rows): rows of accuracy_surprise_rows from
-- the relation named `current_rows`: per run, target month and vintage, the 20 dyads whose actual fell
-- furthest outside the 90 % interval (beyond_90 as in accuracy_log; ties by origin, destination).
CREATE OR REPLACE MACRO accuracy_surprise_rows_of(current_rows) AS TABLE
SELECT run_id, cutoff, model, run_kind, run_created_at, horizon, target_month, vintage, origin, destination,
       actual, q050, q500, q950, beyond_90
FROM (
    SELECT *, greatest(actual - q950, q050 - actual, 0) AS beyond_90
    FROM query_table(current_rows)
    WHERE level = 'dyad' AND (actual > q950 OR actual < q050)
)
QUALIFY row_number() OVER (
    PARTITION BY run_id, target_month, vintage ORDER BY beyond_90 DESC, origin, destination
) <= 20;
