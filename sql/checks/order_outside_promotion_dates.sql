-- rule: order_outside_promotion_dates
-- severity: warn
-- An order line carries a promotion on a day outside that promotion's first and last day.
-- Returned lines (negative quantity) carry the promotion of the purchase they undo and come
-- later by nature: they are not flagged.
-- Reads: staged_transactions, accepted_promotions
-- Parameters: none
WITH lines AS (
    SELECT _row_id, promotion_id, CAST(ordered_at AS DATE) AS ordered_on
    FROM staged_transactions
    WHERE promotion_id IS NOT NULL AND ordered_at IS NOT NULL AND NOT quantity < 0
)

SELECT
    'transactions' AS table_name,
    l._row_id,
    'ordered ' || CAST(l.ordered_on AS VARCHAR) || ', promotion ' || l.promotion_id || ' runs '
        || CAST(CAST(p.starts_at AS DATE) AS VARCHAR) || ' to ' || CAST(CAST(p.ends_at AS DATE) AS VARCHAR) AS detail
FROM lines AS l
INNER JOIN accepted_promotions AS p ON l.promotion_id = p.promotion_id
WHERE l.ordered_on < CAST(p.starts_at AS DATE) OR l.ordered_on > CAST(p.ends_at AS DATE)
