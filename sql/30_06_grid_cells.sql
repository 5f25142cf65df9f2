-- Layer 30 (panel). grid_cells(as_of, first_month, last_month): the (destination, month) cells that a vintage
-- visible on date as_of reports, for months first_month .. last_month: the cells of the grid whose arrivals
-- are known (listed, or an implied zero); every other cell is missing. month_number = year * 12 + month - 1.
-- Columns: destination, month_number.
CREATE OR REPLACE MACRO grid_cells(as_of, first_month, last_month) AS TABLE
SELECT destination, CAST(year(month) * 12 + month(month) - 1 AS INTEGER) AS month_number
FROM flow_cells(as_of, 'latest')
WHERE month BETWEEN CAST(first_month AS DATE) AND CAST(last_month AS DATE);
