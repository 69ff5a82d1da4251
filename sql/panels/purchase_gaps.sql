-- Panel: purchase_gaps — each purchase to the customer's next purchase, in days, censored at the
-- export's last day, with the purchase's deal flag and depth, the coupons the customer had
-- received by then, and whether a promotion the customer could use was running that day.
-- Reads: orders, campaign_assignments (panels), promotions (checked input)
-- Parameters: none
WITH bounds AS (
    SELECT max(ordered_on) AS export_end_on FROM orders
),

coupons AS (
    SELECT customer_id, assigned_at, starts_on, ends_on
    FROM campaign_assignments
    WHERE arm = 'treatment'
),

-- Purchases and coupon arrivals on one time line per customer, in one window pass. Return-only
-- orders (net below zero) are not purchases: they neither start nor end a gap. A coupon that
-- arrives at the same moment as a purchase counts as received before it (kind 0 sorts first).
events AS (
    SELECT customer_id, ordered_at AS event_at, 1 AS kind, order_id, ordered_on, is_deal, depth,
           promotion_id, CAST(NULL AS DATE) AS coupon_starts_on, CAST(NULL AS DATE) AS coupon_ends_on
    FROM orders
    WHERE NOT is_return
    UNION ALL
    SELECT customer_id, assigned_at, 0, NULL, NULL, NULL, NULL, NULL, starts_on, ends_on
    FROM coupons
),

timeline AS (
    SELECT
        *,
        -- the next purchase: the earliest purchase day among the events that follow
        min(CASE WHEN kind = 1 THEN ordered_on END) OVER (
            PARTITION BY customer_id ORDER BY event_at ASC NULLS FIRST, kind ASC NULLS FIRST, order_id ASC NULLS FIRST
            ROWS BETWEEN 1 FOLLOWING AND UNBOUNDED FOLLOWING
        ) AS next_ordered_on,
        sum(1 - kind) OVER (
            PARTITION BY customer_id ORDER BY event_at ASC NULLS FIRST, kind ASC NULLS FIRST, order_id ASC NULLS FIRST
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS coupons_received,
        max(CASE WHEN kind = 0 THEN event_at END) OVER (
            PARTITION BY customer_id ORDER BY event_at ASC NULLS FIRST, kind ASC NULLS FIRST, order_id ASC NULLS FIRST
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS last_coupon_at,
        -- Campaign windows follow one another, so the coupon received last with the latest
        -- window is the one that can cover the purchase day.
        max(coupon_starts_on) OVER (
            PARTITION BY customer_id ORDER BY event_at ASC NULLS FIRST, kind ASC NULLS FIRST, order_id ASC NULLS FIRST
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS held_starts_on,
        max(coupon_ends_on) OVER (
            PARTITION BY customer_id ORDER BY event_at ASC NULLS FIRST, kind ASC NULLS FIRST, order_id ASC NULLS FIRST
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS held_ends_on
    FROM events
),

broadcast_days AS (
    SELECT CAST(starts_at AS DATE) AS starts_on, CAST(ends_at AS DATE) AS ends_on
    FROM promotions
    WHERE audience = 'broadcast'
),

purchases AS (
    SELECT
        t.*,
        EXISTS (
            SELECT 1 FROM broadcast_days AS b WHERE t.ordered_on BETWEEN b.starts_on AND b.ends_on
        ) AS is_broadcast_day
    FROM timeline AS t
    WHERE t.kind = 1
)

SELECT
    p.customer_id,
    p.order_id,
    p.ordered_on,
    p.next_ordered_on,
    CAST(date_diff('day', p.ordered_on, coalesce(p.next_ordered_on, b.export_end_on)) AS INTEGER) AS days_to_next_order,
    p.next_ordered_on IS NOT NULL AS is_next_observed,
    p.is_deal,
    p.depth,
    p.promotion_id,
    CAST(date_diff('day', CAST(p.last_coupon_at AS DATE), p.ordered_on) AS INTEGER) AS days_since_last_coupon,
    CAST(p.coupons_received AS BIGINT) AS coupons_received,
    p.is_broadcast_day OR coalesce(p.ordered_on BETWEEN p.held_starts_on AND p.held_ends_on, false) AS is_promotion_running
FROM purchases AS p
CROSS JOIN bounds AS b
