-- Interval coverage by destination and model: where are the ranges honest, and where too narrow?
-- Dyad forecasts of every horizon, scored against the latest revision, one run per cutoff and model.
--
-- Columns: n forecasts scored; coverage_50 / coverage_90 = share of reported figures inside the 50 % /
-- 90 % interval (honest: about 0.5 / 0.9); above_range / below_range = reported figures above q950 /
-- below q050 (each about 5 % of n when the intervals are honest). Sorted worst 90 % coverage first.
-- Run: dyadcast sql --file sql/queries/coverage_by_destination.sql
SELECT
    model,
    destination,
    count(*) AS n,
    round(avg(CAST(covered_50 AS DOUBLE)), 3) AS coverage_50,
    round(avg(CAST(covered_90 AS DOUBLE)), 3) AS coverage_90,
    count(*) FILTER (WHERE actual > q950) AS above_range,
    count(*) FILTER (WHERE actual < q050) AS below_range
FROM accuracy_log
WHERE level = 'dyad' AND vintage = 'latest' AND is_reference_run AND is_current
GROUP BY model, destination
ORDER BY model, coverage_90, destination;
