-- Layer 50 (accuracy summaries). accuracy_current_rows_of(groups, superseded, older_rows, since): the current
-- rows (the rule of sql/50_accuracy_current.sql within a run: the newest scoring per key) of the groups
-- listed by the relation named `groups`: those scored from `since` on, read here, and `older_rows`, the name
-- of the relation accuracy_older_rows_of returns for them; `superseded` names the relation
-- accuracy_superseded_of returns for them (both from accuracy_group_rows_of(groups)). Only the columns the
-- summaries use. `since` changes what is read, never the result; at the first new batch, the rows read here
-- are the newest, stored together at the end of the log.
CREATE OR REPLACE MACRO accuracy_current_rows_of(groups, superseded, older_rows, since) AS TABLE
SELECT
    a.run_id, a.cutoff, a.model, a.run_kind, a.run_created_at, a.level, a.origin, a.destination, a.horizon,
    a.target_month, a.vintage, a.actual_vintage_key, a.actual, a.mean, a.q050, a.q500, a.q950,
    a.error, a.abs_error, a.sq_error, a.scaled_error, a.poisson_deviance, a.tweedie_deviance,
    a.wis, a.wis_dispersion, a.wis_overprediction, a.wis_underprediction,
    a.covered_50, a.covered_90, a.exceeded, a.predicted_positive, a.actual_positive
FROM accuracy_rows AS a
SEMI JOIN (SELECT DISTINCT run_id, target_month, vintage FROM query_table(groups)) AS g
    ON g.run_id = a.run_id AND g.target_month = a.target_month AND g.vintage = a.vintage
ANTI JOIN query_table(superseded) AS s ON s.row_id = a.rowid
WHERE a.scored_at >= since
UNION ALL
SELECT * FROM query_table(older_rows);
