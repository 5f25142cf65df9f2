-- Layer 50 (accuracy summaries). accuracy_summary_batch_changes: the batches of accuracy_rows not summarised
-- yet ('new') and the summarised batches the log no longer holds as they were ('gone'). Empty, without
-- reading the log, while accuracy_summary_status says the summaries are current (DuckDB skips a scan whose
-- semi join partner is empty).
-- Columns: change ('new' or 'gone'), batch_id, n_rows, first_scored_at, last_scored_at
CREATE OR REPLACE VIEW accuracy_summary_batch_changes AS
WITH gate AS (
    SELECT 1 AS open FROM accuracy_summary_status WHERE stale
),
logged AS MATERIALIZED (
    SELECT a.batch_id, count(*) AS n_rows, min(a.scored_at) AS first_scored_at, max(a.scored_at) AS last_scored_at
    FROM accuracy_rows AS a
    SEMI JOIN gate ON gate.open = 1
    GROUP BY a.batch_id
),
summarised AS (
    SELECT b.batch_id, b.n_rows, b.first_scored_at, b.last_scored_at
    FROM accuracy_summary_batches AS b
    SEMI JOIN gate ON gate.open = 1
)
SELECT 'new' AS change, l.batch_id, l.n_rows, l.first_scored_at, l.last_scored_at
FROM logged AS l
ANTI JOIN summarised AS s ON s.batch_id = l.batch_id AND s.n_rows = l.n_rows
UNION ALL
SELECT 'gone' AS change, s.batch_id, s.n_rows, s.first_scored_at, s.last_scored_at
FROM summarised AS s
ANTI JOIN logged AS l ON l.batch_id = s.batch_id AND l.n_rows = s.n_rows;
