-- Layer 50 (accuracy). accuracy_current: the accuracy rows every summary aggregates. Same columns as
-- accuracy_rows. Two rules pick them:
-- 1. Reruns: for each (cutoff, model, run_kind) only the most recent run counts (latest run_created_at,
--    then the highest run_id; run ids sort by creation time).
-- 2. Vintages: each scoring writes a 'latest' row for every scorable target, also when the latest revision
--    still equals the first release, so 'latest' is always complete. A revision adds a new 'latest' row
--    (new actual_vintage_key) and leaves the older rows in the log; here the newest row per run, level,
--    origin, destination, target month and vintage wins (latest scored_at, then actual_published_on,
--    actual_load_id). The same rule covers the rare 'first_release' change (a backfilled load that was
--    published before the release known so far).
CREATE OR REPLACE VIEW accuracy_current AS
WITH newest_runs AS (
    SELECT run_id
    FROM (SELECT DISTINCT cutoff, model, run_kind, run_id, run_created_at FROM accuracy_rows)
    QUALIFY dense_rank() OVER (
        PARTITION BY cutoff, model, run_kind ORDER BY run_created_at DESC NULLS LAST, run_id DESC
    ) = 1
)
SELECT a.*
FROM accuracy_rows AS a
SEMI JOIN newest_runs AS n ON a.run_id = n.run_id
QUALIFY row_number() OVER (
    PARTITION BY a.run_id, a.level, a.origin, a.destination, a.target_month, a.vintage
    ORDER BY a.scored_at DESC, a.actual_published_on DESC, a.actual_load_id DESC, a.actual_vintage_key DESC
) = 1;
