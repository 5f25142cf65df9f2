-- Layer 20 (clean). signals_as_of(as_of): the latest visible daily intensity of every (country, date,
-- signal) on date as_of (latest published_on, then highest load_id).
-- Columns: country, date, signal, intensity, load_id, published_on.
CREATE OR REPLACE MACRO signals_as_of(as_of) AS TABLE
SELECT country, date, signal, intensity, load_id, published_on
FROM raw_signals
WHERE published_on <= CAST(as_of AS DATE)
QUALIFY row_number() OVER (PARTITION BY country, date, signal ORDER BY published_on DESC, load_id DESC) = 1;
