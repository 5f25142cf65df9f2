-- Layer 20 (clean). origin_indicators_as_of(as_of): the latest visible value of every (country, month,
-- indicator) of the origin (push) indicators on date as_of (latest published_on, then highest load_id).
-- Columns: country, month, indicator, value, load_id, published_on.
CREATE OR REPLACE MACRO origin_indicators_as_of(as_of) AS TABLE
SELECT country, month, indicator, value, load_id, published_on
FROM raw_origin_indicators
WHERE published_on <= CAST(as_of AS DATE)
QUALIFY row_number() OVER (PARTITION BY country, month, indicator ORDER BY published_on DESC, load_id DESC) = 1;
