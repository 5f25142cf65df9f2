-- Layer 30 (panel). panel_months(as_of, cutoff): the months of the panel, from the earliest month any
-- flows row visible on date as_of reports up to the cutoff month (inclusive). Empty when nothing is visible.
-- Columns: month (DATE, first day of month).
CREATE OR REPLACE MACRO panel_months(as_of, cutoff) AS TABLE
SELECT CAST(unnest(generate_series(first_month, CAST(date_trunc('month', CAST(cutoff AS DATE)) AS DATE),
                                   INTERVAL 1 MONTH)) AS DATE) AS month
FROM (SELECT min(month) AS first_month FROM raw_flows WHERE published_on <= CAST(as_of AS DATE))
WHERE first_month IS NOT NULL;
