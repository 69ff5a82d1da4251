-- rule: unknown_promotion
-- severity: reject
-- An order line or an assignment names a promotion that the (accepted) promotions table lacks.
-- Runs after every promotions rule, so a rejected promotion counts as unknown.
-- Reads: staged_transactions, staged_assignments, accepted_promotions
-- Parameters: none
WITH referencing AS (
    SELECT 'transactions' AS table_name, _row_id, promotion_id FROM staged_transactions
    WHERE promotion_id IS NOT NULL
    UNION ALL
    SELECT 'assignments', _row_id, promotion_id FROM staged_assignments
    WHERE promotion_id IS NOT NULL
)

SELECT
    r.table_name,
    r._row_id,
    'promotion_id ' || r.promotion_id || ' is not in the promotions table' AS detail
FROM referencing AS r
ANTI JOIN accepted_promotions AS p ON r.promotion_id = p.promotion_id
