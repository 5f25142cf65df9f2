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
CREATE OR REPLACE MACRO dyad_features(as_of, cutoff, horizon, start) AS TABLE
WITH panel AS (
    SELECT origin, destination, dyad_index, month, CAST(arrivals AS DOUBLE) AS arrivals
    FROM panel_as_of(as_of, cutoff)
),
outflow AS (
    SELECT origin, month, outflow,
           avg(outflow) OVER (PARTITION BY origin ORDER BY month ROWS BETWEEN 2 PRECEDING AND CURRENT ROW)
               AS outflow_roll_3
    FROM origin_outflow_as_of(as_of, cutoff)
),
inflow AS (
    SELECT destination, month, inflow,
           avg(inflow) OVER (PARTITION BY destination ORDER BY month ROWS BETWEEN 2 PRECEDING AND CURRENT ROW)
               AS inflow_roll_3
    FROM destination_inflow_as_of(as_of, cutoff)
),
attrs AS (
    SELECT origin, destination,
           CASE WHEN distance_km > 0 THEN ln(distance_km) END AS log_distance,
           CAST(contiguous AS DOUBLE) AS contiguous,
           CAST(common_language AS DOUBLE) AS common_language,
           CAST(colonial_tie AS DOUBLE) AS colonial_tie,
           CASE WHEN diaspora >= 0 THEN ln(1 + diaspora) END AS log_diaspora
    FROM dyad_attributes_as_of(as_of)
),
rows AS (
    SELECT
        p.origin, p.destination, p.dyad_index, p.month,
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
        CAST(coalesce(least(date_diff('month',
            max(CASE WHEN p.arrivals > 0 THEN p.month END) OVER (w ROWS UNBOUNDED PRECEDING), p.month), 120), 120)
            AS DOUBLE) AS months_since_positive,
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
    LEFT JOIN outflow AS o ON o.origin = p.origin AND o.month = p.month
    LEFT JOIN inflow AS i ON i.destination = p.destination AND i.month = p.month
    WINDOW w AS (PARTITION BY p.dyad_index ORDER BY p.month)
)
SELECT r.* EXCLUDE (dyad_index, calendar_month, targets),
       a.log_distance, a.contiguous, a.common_language, a.colonial_tie, a.log_diaspora,
       r.calendar_month, r.targets
FROM rows AS r
LEFT JOIN attrs AS a ON a.origin = r.origin AND a.destination = r.destination
WHERE start IS NULL OR r.month >= CAST(start AS DATE)
ORDER BY r.dyad_index, r.month;
