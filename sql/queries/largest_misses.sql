-- The 20 largest misses: dyad forecasts whose mean was furthest from the reported figure (latest
-- revision), with the median and 90 % interval, so a miss inside a wide interval reads differently from
-- one outside it (covered_90, beyond_90 = arrivals outside the interval). Figures rounded to 0.1.
-- Only rows that count: one run per cutoff and model, the newest scoring of each forecast.
-- Change `level = 'dyad'` to e.g. 'destination_total' for totals, or add `AND model = '…'`.
-- Run: dyadcast sql --file sql/queries/largest_misses.sql
SELECT
    model,
    cutoff,
    horizon,
    origin,
    destination,
    target_month,
    actual,
    round(mean, 1) AS mean,
    round(q500, 1) AS median,
    round(q050, 1) AS q050,
    round(q950, 1) AS q950,
    round(abs_error, 1) AS abs_error,
    covered_90,
    round(beyond_90, 1) AS beyond_90
FROM accuracy_log
WHERE level = 'dyad' AND vintage = 'latest' AND is_reference_run AND is_current
ORDER BY abs_error DESC, target_month DESC, model, origin, destination, horizon
LIMIT 20;
