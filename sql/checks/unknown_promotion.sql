-- rule: unknown_promotion
-- severity: reject
-- An order line or an assignment names a promotion that the (accepted) promotions table lacks.
-- Runs after every promotions rule, so a rejected promotion counts as unknown; the detail then
-- names why that promotion's own row was rejected (the real cause to fix).
-- Reads: staged_transactions, staged_assignments, accepted_promotions, rejected_promotions
-- Parameters: none
WITH referencing AS (
    SELECT 'transactions' AS table_name, _row_id, promotion_id FROM staged_transactions
    WHERE promotion_id IS NOT NULL
    UNION ALL
    SELECT 'assignments', _row_id, promotion_id FROM staged_assignments
    WHERE promotion_id IS NOT NULL
),

rejected_rows AS (
    SELECT promotion_id, arg_min(rule || ': ' || detail, rule_order) AS cause
    FROM rejected_promotions
    WHERE promotion_id IS NOT NULL
    GROUP BY promotion_id
)

SELECT
    r.table_name,
    r._row_id,
    CASE
        WHEN x.cause IS NOT NULL THEN 'promotion_id ' || r.promotion_id
            || ' was rejected in the promotions table (' || x.cause || '); fix that row'
        ELSE 'promotion_id ' || r.promotion_id || ' is not in the promotions table'
    END AS detail
FROM referencing AS r
LEFT JOIN rejected_rows AS x ON r.promotion_id = x.promotion_id
ANTI JOIN accepted_promotions AS p ON r.promotion_id = p.promotion_id
