-- Layer 20 (clean). actuals_as_of(as_of): the latest revision of every reported dyad-month as it stood on
-- date as_of, implied zeros included. Same columns as actuals_latest:
-- origin, destination, month, arrivals, load_id, published_on.
CREATE OR REPLACE MACRO actuals_as_of(as_of) AS TABLE
SELECT origin, destination, month, arrivals, load_id, published_on
FROM flow_actuals(as_of, 'latest');
