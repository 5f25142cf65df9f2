-- Layer 20 (clean). flow_cells(as_of, pick): for every (destination, month) reported by a vintage visible on
-- date as_of, the one vintage used: pick = 'latest' (latest published_on, then highest load_id) or 'first'
-- (the first release). Cells no vintage reports have no row: they are missing, not zero.
-- Columns: destination, month, load_id, published_on.
CREATE OR REPLACE MACRO flow_cells(as_of, pick) AS TABLE
SELECT destination, month, load_id, published_on
FROM flow_vintages_as_of(as_of)
WHERE CASE pick WHEN 'latest' THEN recency = 1 WHEN 'first' THEN release_number = 1
          ELSE error('flow_cells: pick must be ''latest'' or ''first'', got ''' || pick || '''') END;
