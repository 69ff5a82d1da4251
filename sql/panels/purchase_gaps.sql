-- Panel: purchase_gaps — each purchase to the customer's next purchase, in days, censored at the
-- export's last day, with the purchase's deal flag and depth, the coupons the customer had
-- received by then, and whether a promotion the customer could use was running that day.
-- Reads: orders (panel), promotions, assignments (checked inputs)
-- Parameters: none
WITH bounds AS (
    SELECT max(ordered_on) AS export_end_on FROM orders
),

-- Return-only orders (net below zero) are not purchases: they neither start nor end a gap.
purchases AS (
    SELECT customer_id, order_id, ordered_at, ordered_on, is_deal, depth, promotion_id
    FROM orders
    WHERE NOT is_return
),

first_assignments AS (
    SELECT promotion_id, customer_id, arg_min(arm, assigned_at) AS arm, min(assigned_at) AS assigned_at
    FROM assignments
    GROUP BY promotion_id, customer_id
),

coupons AS (
    SELECT a.customer_id, a.assigned_at, a.promotion_id
    FROM first_assignments AS a
    WHERE a.arm = 'treatment'
),

-- Purchases and coupon arrivals on one time line per customer; a coupon that arrives at the
-- same moment as a purchase counts as received before it (kind 0 sorts first).
events AS (
    SELECT customer_id, ordered_at AS event_at, 1 AS kind, order_id FROM purchases
    UNION ALL
    SELECT customer_id, assigned_at, 0, NULL FROM coupons
),

coupon_history AS (
    SELECT
        customer_id,
        order_id,
        sum(CASE WHEN kind = 0 THEN 1 ELSE 0 END) OVER (
            PARTITION BY customer_id ORDER BY event_at ASC NULLS FIRST, kind ASC NULLS FIRST, order_id ASC NULLS FIRST
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS coupons_received,
        max(CASE WHEN kind = 0 THEN event_at END) OVER (
            PARTITION BY customer_id ORDER BY event_at ASC NULLS FIRST, kind ASC NULLS FIRST, order_id ASC NULLS FIRST
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS last_coupon_at
    FROM events
),

sequenced AS (
    SELECT
        p.*,
        lead(p.ordered_on) OVER (PARTITION BY p.customer_id ORDER BY p.ordered_at, p.order_id) AS next_ordered_on
    FROM purchases AS p
),

broadcast_days AS (
    SELECT CAST(starts_at AS DATE) AS starts_on, CAST(ends_at AS DATE) AS ends_on
    FROM promotions
    WHERE audience = 'broadcast'
),

coupon_days AS (
    SELECT c.customer_id, CAST(p.starts_at AS DATE) AS starts_on, CAST(p.ends_at AS DATE) AS ends_on
    FROM coupons AS c
    INNER JOIN promotions AS p ON c.promotion_id = p.promotion_id
),

running_on_order_day AS (
    SELECT s.customer_id, s.order_id
    FROM sequenced AS s
    INNER JOIN broadcast_days AS b ON s.ordered_on BETWEEN b.starts_on AND b.ends_on
    UNION
    SELECT s.customer_id, s.order_id
    FROM sequenced AS s
    INNER JOIN coupon_days AS c
        ON s.customer_id = c.customer_id AND s.ordered_on BETWEEN c.starts_on AND c.ends_on
)

SELECT
    s.customer_id,
    s.order_id,
    s.ordered_on,
    s.next_ordered_on,
    CAST(date_diff('day', s.ordered_on, coalesce(s.next_ordered_on, b.export_end_on)) AS INTEGER) AS days_to_next_order,
    s.next_ordered_on IS NOT NULL AS is_next_observed,
    s.is_deal,
    s.depth,
    s.promotion_id,
    CAST(date_diff('day', CAST(h.last_coupon_at AS DATE), s.ordered_on) AS INTEGER) AS days_since_last_coupon,
    CAST(coalesce(h.coupons_received, 0) AS BIGINT) AS coupons_received,
    r.order_id IS NOT NULL AS is_promotion_running
FROM sequenced AS s
CROSS JOIN bounds AS b
LEFT JOIN coupon_history AS h ON s.customer_id = h.customer_id AND s.order_id = h.order_id
LEFT JOIN running_on_order_day AS r ON s.customer_id = r.customer_id AND s.order_id = r.order_id
