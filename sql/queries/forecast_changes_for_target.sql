-- How the forecast for one target month changed from cutoff to cutoff, beside what was then reported.
--
-- Edit `chosen` below: the model, the level ('dyad', 'origin_total', 'destination_total', 'world_total'),
-- the codes ('*' on the side a total spans) and the target month. By default: the world total of
-- poisson_glm for the newest month that has reported arrivals (replace the sub-query by, e.g.,
-- DATE '2025-03-01' to pick a month).
--
-- One row per cutoff and run kind (the newest run of each): horizon, the 90 % and 50 % intervals, the
-- median and mean (rounded to 0.1), and the reported figure as first released and as latest revised
-- (NULL until reported).
-- Run: dyadcast sql --file sql/queries/forecast_changes_for_target.sql
WITH chosen AS (
    SELECT
        'poisson_glm' AS model,
        'world_total' AS level,
        '*' AS origin,
        '*' AS destination,
        (SELECT max(month) FROM actuals_latest) AS target_month
),
actuals AS (
    SELECT 'first_release' AS vintage, 'dyad' AS level, origin, destination, month, arrivals
    FROM actuals_first_release
    UNION ALL
    SELECT 'latest', 'dyad', origin, destination, month, arrivals FROM actuals_latest
    UNION ALL
    SELECT vintage, level, origin, destination, month, arrivals FROM actuals_totals
)
SELECT
    f.target_month,
    f.cutoff,
    f.horizon,
    f.run_kind,
    f.run_id,
    round(f.q050, 1) AS q050,
    round(f.q250, 1) AS q250,
    round(f.q500, 1) AS median,
    round(f.q750, 1) AS q750,
    round(f.q950, 1) AS q950,
    round(f.mean, 1) AS mean,
    fr.arrivals AS actual_first_release,
    la.arrivals AS actual_latest
FROM forecasts_all AS f
JOIN chosen AS c
  ON f.model = c.model AND f.level = c.level AND f.origin = c.origin AND f.destination = c.destination
 AND f.target_month = c.target_month
LEFT JOIN actuals AS fr
  ON fr.vintage = 'first_release' AND fr.level = f.level AND fr.origin = f.origin
 AND fr.destination = f.destination AND fr.month = f.target_month
LEFT JOIN actuals AS la
  ON la.vintage = 'latest' AND la.level = f.level AND la.origin = f.origin
 AND la.destination = f.destination AND la.month = f.target_month
WHERE f.is_latest_run
ORDER BY f.cutoff, f.run_kind;
