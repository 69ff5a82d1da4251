-- rule: return_sign_mismatch
-- severity: warn
-- A returned line (negative quantity) with a positive net amount: the customer would have paid
-- for a return. Usually the export writes refunds unsigned; the row is kept (amounts are netted
-- as they are), so the order's net amount is likely too high.
-- Reads: staged_transactions
-- Parameters: none
WITH lines AS (
    SELECT _row_id, quantity, net_amount FROM staged_transactions
)

SELECT
    'transactions' AS table_name,
    _row_id,
    'quantity ' || CAST(quantity AS VARCHAR) || ' is a return but net_amount ' || CAST(net_amount AS VARCHAR)
    || ' is positive; a refund should be negative' AS detail
FROM lines
WHERE quantity < 0 AND net_amount > 0
