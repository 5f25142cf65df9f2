-- Layer 50 (accuracy summaries). accuracy_older_rows_of(group_rows, superseded, since): the current rows scored
-- before `since` (a TIMESTAMP) of the groups in `group_rows` (the name of a relation shaped like
-- accuracy_group_rows_of), given `superseded`, the name of the relation accuracy_superseded_of(group_rows)
-- returns. Only groups where some of those rows are still current are read: after a revision that rescored
-- whole target months, none. accuracy_current_rows_of adds the rows scored from `since` on. Materialize the
-- result when it is read more than once: these rows may lie anywhere in the log.
-- Columns: those of accuracy_current_rows_of
CREATE OR REPLACE MACRO accuracy_older_rows_of(group_rows, superseded, since) AS TABLE
WITH set_aside AS MATERIALIZED (
    SELECT row_id, run_id, target_month, vintage FROM query_table(superseded) WHERE scored_at < since
),
kept_groups AS (
    SELECT o.run_id, o.target_month, o.vintage
    FROM (
        SELECT run_id, target_month, vintage, count(*) AS n
        FROM query_table(group_rows) WHERE scored_at < since
        GROUP BY run_id, target_month, vintage
    ) AS o
    LEFT JOIN (
        SELECT run_id, target_month, vintage, count(*) AS n FROM set_aside GROUP BY run_id, target_month, vintage
    ) AS s ON s.run_id = o.run_id AND s.target_month = o.target_month AND s.vintage = o.vintage
    WHERE o.n > coalesce(s.n, 0)
)
SELECT
    a.run_id, a.cutoff, a.model, a.run_kind, a.run_created_at, a.level, a.origin, a.destination, a.horizon,
    a.target_month, a.vintage, a.actual_vintage_key, a.actual, a.mean, a.q050, a.q500, a.q950,
    a.error, a.abs_error, a.sq_error, a.scaled_error, a.poisson_deviance, a.tweedie_deviance,
    a.wis, a.wis_dispersion, a.wis_overprediction, a.wis_underprediction,
    a.covered_50, a.covered_90, a.exceeded, a.predicted_positive, a.actual_positive
FROM accuracy_rows AS a
SEMI JOIN kept_groups AS g ON g.run_id = a.run_id AND g.target_month = a.target_month AND g.vintage = a.vintage
ANTI JOIN set_aside AS s ON s.row_id = a.rowid
WHERE a.scored_at < since;
