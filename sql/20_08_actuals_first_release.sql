-- Layer 20 (clean). actuals_first_release: the first published figure of every reported dyad-month over
-- all loads (the earliest vintage mentioning its (destination, month)), implied zeros included.
-- Columns: origin, destination, month, arrivals, load_id, published_on (of the vintage used).
CREATE OR REPLACE VIEW actuals_first_release AS
SELECT origin, destination, month, arrivals, load_id, published_on
FROM flow_actuals(DATE '9999-12-31', 'first');
