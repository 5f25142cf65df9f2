-- Layer 50 (accuracy summaries). accuracy_summary_status: one row saying whether the stored summaries
-- (sql/06_schema_accuracy_summaries.sql) may differ from accuracy_rows. It reads only table statistics, so
-- it costs nothing however long the log is: the log's row count and first and last scored_at against those
-- of the batches summarised. The log only grows by whole batches (a new or recovered batch changes the
-- count), and rows are only deleted by rebuild_accuracy_index, which inserts the same files again; a
-- deletion that is not refilled changes the count. Not seen: rows deleted and as many others inserted
-- between the first and last scored_at by hand, which no dyadcast command does. When stale,
-- accuracy_summary_batch_changes says exactly what changed.
-- Columns: stale, logged_rows, summarised_rows
CREATE OR REPLACE VIEW accuracy_summary_status AS
WITH logged AS (
    SELECT count(*) AS n_rows, min(scored_at) AS first_scored_at, max(scored_at) AS last_scored_at
    FROM accuracy_rows
),
summarised AS (
    SELECT CAST(coalesce(sum(n_rows), 0) AS BIGINT) AS n_rows, min(first_scored_at) AS first_scored_at,
           max(last_scored_at) AS last_scored_at
    FROM accuracy_summary_batches
)
SELECT
    (l.n_rows <> s.n_rows
     OR l.first_scored_at IS DISTINCT FROM s.first_scored_at
     OR l.last_scored_at IS DISTINCT FROM s.last_scored_at) AS stale,
    l.n_rows AS logged_rows,
    s.n_rows AS summarised_rows
FROM logged AS l, summarised AS s;
