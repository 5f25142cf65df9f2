-- Layer 50 (accuracy summaries). accuracy_summary_runs_of(groups): every run of the relation named `groups`
-- (shaped like accuracy_groups) with the three rules that say which runs count, as the row-level views
-- state them:
--   is_latest_run     the newest run of its cutoff x model x run_kind (accuracy_current, accuracy_summary,
--                     exceedances): latest run_created_at, then the highest run_id
--   is_reference_run  the run that stands for its cutoff x model (accuracy_log, accuracy_overview, the
--                     report): the newest monthly run, else the newest backtest
--   is_skill_run      among the latest runs of its cutoff x model, those of the first run kind with monthly
--                     first (skill_vs_persistence, accuracy_by_horizon)
-- Columns: run_id, cutoff, model, run_kind, run_created_at, is_latest_run, is_reference_run, is_skill_run
CREATE OR REPLACE MACRO accuracy_summary_runs_of(groups) AS TABLE
WITH runs AS (
    SELECT DISTINCT run_id, cutoff, model, run_kind, run_created_at FROM query_table(groups)
),
ranked AS (
    SELECT
        *,
        dense_rank() OVER (
            PARTITION BY cutoff, model, run_kind ORDER BY run_created_at DESC NULLS LAST, run_id DESC
        ) = 1 AS is_latest_run,
        row_number() OVER (
            PARTITION BY cutoff, model
            ORDER BY (run_kind = 'monthly') DESC, run_created_at DESC NULLS LAST, run_id DESC
        ) = 1 AS is_reference_run
    FROM runs
)
SELECT
    run_id, cutoff, model, run_kind, run_created_at, is_latest_run, is_reference_run,
    is_latest_run AND dense_rank() OVER (
        PARTITION BY cutoff, model, is_latest_run ORDER BY (run_kind = 'monthly') DESC
    ) = 1 AS is_skill_run
FROM ranked;
