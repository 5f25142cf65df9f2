-- Layer 20 (clean). actuals_latest: the latest revision of every reported dyad-month over all loads,
-- implied zeros included for every dyad of the universe in a reported (destination, month).
-- Columns: origin, destination, month, arrivals, load_id, published_on (of the vintage used).
CREATE OR REPLACE VIEW actuals_latest AS
SELECT origin, destination, month, arrivals, load_id, published_on
FROM flow_actuals(DATE '9999-12-31', 'latest');
