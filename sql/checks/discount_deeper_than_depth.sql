-- rule: discount_deeper_than_depth
-- severity: warn
-- A percent-off line whose discount is deeper than the promotion's stated depth (half a point of
-- tolerance for rounding), or an amount-off line discounted by more than the stated amount.
-- Reads: staged_transactions, accepted_promotions
-- Parameters: none
WITH lines AS (
    SELECT _row_id, promotion_id, list_amount, net_amount,
           coalesce(discount_amount, list_amount - net_amount) AS discount_amount
    FROM staged_transactions
    WHERE promotion_id IS NOT NULL
),

promotion_depths AS (
    SELECT promotion_id, mechanic, depth FROM accepted_promotions WHERE depth IS NOT NULL
)

SELECT
    'transactions' AS table_name,
    l._row_id,
    'discount ' || round(l.discount_amount, 2) || ' on list ' || round(l.list_amount, 2)
        || ' is deeper than ' || p.mechanic || ' depth ' || p.depth AS detail
FROM lines AS l
INNER JOIN promotion_depths AS p ON l.promotion_id = p.promotion_id
WHERE (p.mechanic = 'percent_off' AND l.list_amount > 0
       AND l.discount_amount / l.list_amount > p.depth + 0.005)
   OR (p.mechanic = 'amount_off' AND l.discount_amount > p.depth + 0.005)
