-- Layer 50 (accuracy summaries). accuracy_pair_stats_of(current_rows): rows of accuracy_pair_stats computed
-- from the relation named `current_rows` (shaped like accuracy_current_rows_of; it must hold every run of
-- the target months and vintages it covers). The match is the one of skill_vs_persistence: same cutoff, run
-- kind, level, origin, destination, target month, horizon, vintage and actual (actual_vintage_key).
-- `matched` is materialized on purpose: it keeps DuckDB from pre-aggregating each side of the join by its
-- keys, which costs more than the join itself here.
CREATE OR REPLACE MACRO accuracy_pair_stats_of(current_rows) AS TABLE
WITH pair_rows AS (
    SELECT run_id, cutoff, model, run_kind, level, origin, destination, horizon, target_month, vintage,
           actual_vintage_key, wis, abs_error
    FROM query_table(current_rows)
),
matched AS MATERIALIZED (
    SELECT m.run_id, p.run_id AS persistence_run_id, m.level, m.horizon, m.target_month, m.vintage,
           m.wis, p.wis AS wis_persistence, m.abs_error, p.abs_error AS abs_error_persistence
    FROM pair_rows AS m
    JOIN pair_rows AS p
      ON  p.model = 'persistence'
      AND p.cutoff = m.cutoff AND p.run_kind = m.run_kind AND p.level = m.level
      AND p.origin = m.origin AND p.destination = m.destination AND p.target_month = m.target_month
      AND p.horizon = m.horizon AND p.vintage = m.vintage AND p.actual_vintage_key = m.actual_vintage_key
)
SELECT
    run_id, persistence_run_id, level, horizon, target_month, vintage,
    count(*) AS n_common,
    sum(wis) AS sum_wis,
    sum(wis_persistence) AS sum_wis_persistence,
    sum(abs_error) AS sum_abs_error,
    sum(abs_error_persistence) AS sum_abs_error_persistence
FROM matched
GROUP BY run_id, persistence_run_id, level, horizon, target_month, vintage;
