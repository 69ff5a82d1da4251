-- rule: net_above_list
-- severity: warn
-- A line that paid more than its list amount (a negative discount), beyond a cent of rounding.
-- Returned lines carry negative amounts, so sizes are compared.
-- Reads: staged_transactions
-- Parameters: none
WITH lines AS (
    SELECT _row_id, net_amount, list_amount FROM staged_transactions
    WHERE net_amount IS NOT NULL AND list_amount IS NOT NULL
)

SELECT
    'transactions' AS table_name,
    _row_id,
    'net ' || round(net_amount, 2) || ' above list ' || round(list_amount, 2) AS detail
FROM lines
WHERE abs(net_amount) > abs(list_amount) + 0.01
