-- Analyst view `forecasts_all`: every forecast row ever issued (monthly runs and backtests), with the
-- facts about its run. Reads only warehouse tables, so it works from any DuckDB client and folder.
--
-- Columns
--   run_id         snapshot run; its files are under snapshots/cutoff=YYYY-MM/model=NAME/run=RUN_ID/
--   cutoff         DATE (first of month): the last month whose arrivals the run used
--   as_of          DATE: only data published on or before this day was visible to the run
--   model          model name from dyadcast.toml ('persistence' is the baseline every run includes)
--   run_kind       'monthly' or 'backtest'
--   created_at     TIMESTAMP (UTC) when the run was indexed
--   level          'dyad', 'origin_total', 'destination_total' or 'world_total'
--   origin         origin country code; '*' for destination and world totals
--   destination    destination country code; '*' for origin and world totals
--   horizon        months after the cutoff (1 … H)
--   target_month   DATE: the month forecast, cutoff + horizon
--   mean           predictive mean of arrivals
--   q050, q250, q500, q750, q950
--                  predictive quantiles 5 %, 25 %, 50 % (q500, the median), 75 %, 95 % of arrivals;
--                  q250–q750 is the 50 % interval, q050–q950 the 90 % interval
--   p_positive     probability of at least one arrival
--   run_rank       1 for the newest run of its cutoff × model × run_kind, 2 for the one before, …
--   is_latest_run  run_rank = 1 (reruns never overwrite: older runs stay, with run_rank > 1)
CREATE OR REPLACE VIEW forecasts_all AS
WITH runs AS (
    SELECT
        run_id,
        as_of,
        created_at,
        row_number() OVER (PARTITION BY cutoff, model, run_kind ORDER BY created_at DESC, run_id DESC) AS run_rank
    FROM snapshot_runs
)
SELECT
    f.run_id, f.cutoff, r.as_of, f.model, f.run_kind, r.created_at,
    f.level, f.origin, f.destination, f.horizon, f.target_month,
    f.mean, f.q050, f.q250, f.q500, f.q750, f.q950, f.p_positive,
    r.run_rank,
    coalesce(r.run_rank = 1, false) AS is_latest_run
FROM forecast_rows AS f
LEFT JOIN runs AS r USING (run_id);
