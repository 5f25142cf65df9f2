-- Layer 40 (features). push_indicators(as_of, cutoff): for every origin of the universe, panel month t and
-- origin indicator, the value of the most recent month <= t that has a value visible on date as_of.
-- Indicators are published with a lag, so value_month is often a few months before t.
-- Columns: country, month, indicator, value, value_month.
CREATE OR REPLACE MACRO push_indicators(as_of, cutoff) AS TABLE
WITH known AS (
    SELECT country, month, indicator, value
    FROM origin_indicators_as_of(as_of)
    WHERE value IS NOT NULL AND month <= CAST(cutoff AS DATE)
),
grid AS (
    SELECT c.country, m.month, i.indicator
    FROM (SELECT DISTINCT origin AS country FROM dyads_as_of(as_of)) AS c
    CROSS JOIN panel_months(as_of, cutoff) AS m
    CROSS JOIN (SELECT DISTINCT indicator FROM known) AS i
)
SELECT g.country, g.month, g.indicator, k.value, k.month AS value_month
FROM grid AS g
ASOF LEFT JOIN known AS k ON k.country = g.country AND k.indicator = g.indicator AND k.month <= g.month;
