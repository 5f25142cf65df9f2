-- Layer 40 (features). dyad_features(as_of, cutoff, horizon, start): one row per dyad and anchor month t
-- with start <= t <= cutoff (start NULL: from the first panel month), built only from rows published on or
-- before as_of. History before `start` still feeds the lags and rolling means. Rows come sorted by
-- (origin, destination, month). Country-level push / pull / signal columns are added in Python
-- (dyadcast.features) because their names come from the data.
-- Columns: origin, destination, month;
--   lag_1 .. lag_12        arrivals in month t-k+1 (lag_1 is t itself), NULL where missing;
--   roll_mean_3/6/12       mean of the reported months in the window ending at t;
--   months_since_positive  0 if t is positive, else months since the last positive month, capped at 120;
--   origin_share_12        dyad arrivals / origin outflow over the 12 months ending t (months the dyad
--                          reports only, NULL when the outflow is 0);
--   origin_outflow_lag_1, origin_outflow_roll_3, destination_inflow_lag_1, destination_inflow_roll_3;
--   log_distance, contiguous, common_language, colonial_tie, log_diaspora (log1p) from the latest
--   visible dyad attributes; calendar_month (1-12 of t);
--   targets                list of `horizon` values: arrivals in t+1 .. t+h, NULL after the cutoff or missing.
-- Built for scale (measured in bench/README.md):
--   * the panel is built once (MATERIALIZED) and the origin / destination totals are summed from it, instead of
--     rebuilding panel_as_of three times through origin_outflow_as_of and destination_inflow_as_of;
--   * only the months the windows need are built: from 11 months before `start` (lags and 12-month windows);
--     months_since_positive takes the last positive month before that from one aggregate over positive rows,
--     so the cost follows the training window, not the length of the history;
--   * windows, joins and the final sort run on integer dyad / country ids instead of text codes.
CREATE OR REPLACE MACRO dyad_features(as_of, cutoff, horizon, start) AS TABLE
WITH origins AS (
    SELECT origin, row_number() OVER (ORDER BY origin) AS origin_id
    FROM (SELECT DISTINCT origin FROM dyads_as_of(as_of))
),
destinations AS (
    SELECT destination, row_number() OVER (ORDER BY destination) AS destination_id
    FROM (SELECT DISTINCT destination FROM dyads_as_of(as_of))
),
dyads AS (
    SELECT d.origin, d.destination, o.origin_id, t.destination_id,
           row_number() OVER (ORDER BY d.origin, d.destination) AS dyad_id
    FROM dyads_as_of(as_of) AS d JOIN origins AS o USING (origin) JOIN destinations AS t USING (destination)
),
span AS (  -- lags and 12-month windows need 11 months before `start`; earlier months are not read
    SELECT greatest(first_month, coalesce(CAST(date_trunc('month', CAST(start AS DATE)) - INTERVAL 11 MONTH AS DATE),
                                          first_month)) AS lo
    FROM (SELECT min(month) AS first_month FROM raw_flows WHERE published_on <= CAST(as_of AS DATE))
),
months AS (
    SELECT CAST(unnest(generate_series(lo, CAST(date_trunc('month', CAST(cutoff AS DATE)) AS DATE),
                                       INTERVAL 1 MONTH)) AS DATE) AS month
    FROM span WHERE lo IS NOT NULL
),
cells AS (
    SELECT t.destination_id, v.destination, v.month, v.load_id, v.published_on
    FROM flow_vintages_as_of(as_of) AS v JOIN destinations AS t USING (destination)
    WHERE v.recency = 1 AND v.month <= CAST(cutoff AS DATE)
),
listed AS (
    SELECT r.origin, r.destination, r.month, sum(r.arrivals) AS arrivals
    FROM raw_flows AS r
    SEMI JOIN cells AS c USING (destination, month, load_id, published_on)
    GROUP BY r.origin, r.destination, r.month
),
listed_ids AS (
    SELECT d.dyad_id, l.month, l.arrivals FROM listed AS l JOIN dyads AS d USING (origin, destination)
),
before AS (  -- the last positive month before the panel's first month: months_since_positive needs no more
    SELECT dyad_id, max(month) AS last_positive FROM listed_ids, span
    WHERE arrivals > 0 AND month < span.lo GROUP BY dyad_id
),
panel AS MATERIALIZED (
    SELECT d.dyad_id, d.origin_id, d.destination_id, m.month,
           CASE WHEN c.destination_id IS NOT NULL THEN CAST(coalesce(l.arrivals, 0) AS DOUBLE) END AS arrivals
    FROM dyads AS d
    CROSS JOIN months AS m
    LEFT JOIN cells AS c ON c.destination_id = d.destination_id AND c.month = m.month
    LEFT JOIN listed_ids AS l ON l.dyad_id = d.dyad_id AND l.month = m.month
),
outflow AS (
    SELECT origin_id, month, outflow,
           avg(outflow) OVER (PARTITION BY origin_id ORDER BY month ROWS BETWEEN 2 PRECEDING AND CURRENT ROW)
               AS outflow_roll_3
    FROM (SELECT origin_id, month, sum(arrivals) AS outflow FROM panel GROUP BY origin_id, month)
),
inflow AS (
    SELECT destination_id, month, inflow,
           avg(inflow) OVER (PARTITION BY destination_id ORDER BY month ROWS BETWEEN 2 PRECEDING AND CURRENT ROW)
               AS inflow_roll_3
    FROM (SELECT destination_id, month, sum(arrivals) AS inflow FROM panel GROUP BY destination_id, month)
),
attrs AS (
    SELECT d.dyad_id,
           CASE WHEN a.distance_km > 0 THEN ln(a.distance_km) END AS log_distance,
           CAST(a.contiguous AS DOUBLE) AS contiguous,
           CAST(a.common_language AS DOUBLE) AS common_language,
           CAST(a.colonial_tie AS DOUBLE) AS colonial_tie,
           CASE WHEN a.diaspora >= 0 THEN ln(1 + a.diaspora) END AS log_diaspora
    FROM dyad_attributes_as_of(as_of) AS a JOIN dyads AS d USING (origin, destination)
),
rows AS (
    SELECT
        p.dyad_id, p.month,
        p.arrivals AS lag_1,
        lag(p.arrivals, 1) OVER w AS lag_2,
        lag(p.arrivals, 2) OVER w AS lag_3,
        lag(p.arrivals, 3) OVER w AS lag_4,
        lag(p.arrivals, 4) OVER w AS lag_5,
        lag(p.arrivals, 5) OVER w AS lag_6,
        lag(p.arrivals, 6) OVER w AS lag_7,
        lag(p.arrivals, 7) OVER w AS lag_8,
        lag(p.arrivals, 8) OVER w AS lag_9,
        lag(p.arrivals, 9) OVER w AS lag_10,
        lag(p.arrivals, 10) OVER w AS lag_11,
        lag(p.arrivals, 11) OVER w AS lag_12,
        avg(p.arrivals) OVER (w ROWS BETWEEN 2 PRECEDING AND CURRENT ROW) AS roll_mean_3,
        avg(p.arrivals) OVER (w ROWS BETWEEN 5 PRECEDING AND CURRENT ROW) AS roll_mean_6,
        avg(p.arrivals) OVER (w ROWS BETWEEN 11 PRECEDING AND CURRENT ROW) AS roll_mean_12,
        CAST(coalesce(least(date_diff('month', coalesce(
            max(CASE WHEN p.arrivals > 0 THEN p.month END) OVER (w ROWS UNBOUNDED PRECEDING), b.last_positive),
            p.month), 120), 120) AS DOUBLE) AS months_since_positive,
        sum(p.arrivals) OVER (w ROWS BETWEEN 11 PRECEDING AND CURRENT ROW)
            / nullif(sum(CASE WHEN p.arrivals IS NOT NULL THEN o.outflow END)
                     OVER (w ROWS BETWEEN 11 PRECEDING AND CURRENT ROW), 0) AS origin_share_12,
        o.outflow AS origin_outflow_lag_1,
        o.outflow_roll_3 AS origin_outflow_roll_3,
        i.inflow AS destination_inflow_lag_1,
        i.inflow_roll_3 AS destination_inflow_roll_3,
        CAST(month(p.month) AS INTEGER) AS calendar_month,
        list_resize(coalesce(list(p.arrivals) OVER (w ROWS BETWEEN 1 FOLLOWING AND CAST(horizon AS INTEGER) FOLLOWING),
                             CAST([] AS DOUBLE[])), CAST(horizon AS INTEGER)) AS targets
    FROM panel AS p
    LEFT JOIN before AS b ON b.dyad_id = p.dyad_id
    LEFT JOIN outflow AS o ON o.origin_id = p.origin_id AND o.month = p.month
    LEFT JOIN inflow AS i ON i.destination_id = p.destination_id AND i.month = p.month
    WINDOW w AS (PARTITION BY p.dyad_id ORDER BY p.month)
)
SELECT d.origin, d.destination, r.month, r.* EXCLUDE (dyad_id, month, calendar_month, targets),
       a.log_distance, a.contiguous, a.common_language, a.colonial_tie, a.log_diaspora,
       r.calendar_month, r.targets
FROM rows AS r
JOIN dyads AS d USING (dyad_id)
LEFT JOIN attrs AS a USING (dyad_id)
WHERE start IS NULL OR r.month >= CAST(start AS DATE)
ORDER BY r.dyad_id, r.month;
