-- Accuracy by model and horizon over the 12 most recent scored cutoffs (dyads, latest revision of the
-- actuals, one run per cutoff and model as in accuracy_overview).
--
-- Pools accuracy_overview over those cutoffs, weighting each cutoff by its number of scored forecasts n
-- (rmse: the n-weighted mean of rmse², then the root). Lower mae, rmse and mean_wis are better; honest
-- intervals have coverage_50 near 0.5 and coverage_90 near 0.9; bias > 0 means over-forecasting.
-- For skill against persistence on exactly the same targets, see the view skill_vs_persistence.
-- Run: dyadcast sql --file sql/queries/accuracy_last_12_cutoffs.sql
WITH recent AS (
    SELECT DISTINCT cutoff
    FROM accuracy_overview
    WHERE level = 'dyad' AND vintage = 'latest'
    ORDER BY cutoff DESC
    LIMIT 12
)
SELECT
    model,
    horizon,
    count(*) AS cutoffs,
    min(cutoff) AS first_cutoff,
    max(cutoff) AS last_cutoff,
    CAST(sum(n) AS BIGINT) AS n,
    round(sum(mae * n) / sum(n), 3) AS mae,
    round(sqrt(sum(rmse * rmse * n) / sum(n)), 3) AS rmse,
    round(sum(mean_wis * n) / sum(n), 3) AS mean_wis,
    round(sum(coverage_50 * n) / sum(n), 3) AS coverage_50,
    round(sum(coverage_90 * n) / sum(n), 3) AS coverage_90,
    round(sum(bias * n) / sum(n), 3) AS bias
FROM accuracy_overview
JOIN recent USING (cutoff)
WHERE level = 'dyad' AND vintage = 'latest'
GROUP BY model, horizon
ORDER BY horizon, mean_wis, model;
