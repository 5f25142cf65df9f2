-- Analyst view `forecasts_latest`: the newest forecast of every target, per model. For each
-- model × level × origin × destination × target_month it keeps the row of the most recent cutoff and,
-- within that cutoff, of the most recent run (any run kind; filter forecasts_all on run_kind to choose).
--
-- Columns: the same as forecasts_all (run_id, cutoff, as_of, model, run_kind, created_at, level, origin,
-- destination, horizon, target_month, mean, q050, q250, q500, q750, q950, p_positive, run_rank,
-- is_latest_run). `horizon` is therefore the shortest horizon at which the target was forecast.
CREATE OR REPLACE VIEW forecasts_latest AS
SELECT *
FROM forecasts_all
QUALIFY row_number() OVER (
    PARTITION BY model, level, origin, destination, target_month
    ORDER BY cutoff DESC, created_at DESC NULLS LAST, run_id DESC
) = 1;
