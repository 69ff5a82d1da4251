-- Panel: purchase_gaps — each purchase to the customer's next purchase, in days, censored at the
-- export's last day, with the purchase's deal flag and depth, the coupons the customer had
-- received by then, and whether a promotion the customer could use was running that day.
-- Reads: orders, campaign_assignments (panels), promotions (checked input)
-- Parameters: none
WITH bounds AS (
    SELECT max(ordered_on) AS export_end_on FROM orders
),

-- Return-only orders (net below zero) are not purchases: they neither start nor end a gap.
purchases AS (
    SELECT
        customer_id,
        order_id,
        ordered_at,
        ordered_on,
        is_deal,
        depth,
        promotion_id,
        lead(ordered_on) OVER (
            PARTITION BY customer_id ORDER BY ordered_at ASC NULLS FIRST, order_id ASC NULLS FIRST
        ) AS next_ordered_on
    FROM orders
    WHERE NOT is_return
),

-- Coupons (treatment assignments) per customer and moment of arrival.
coupon_moments AS (
    SELECT customer_id, assigned_at, count(*) AS coupons, max(starts_on) AS starts_on, max(ends_on) AS ends_on
    FROM campaign_assignments
    WHERE arm = 'treatment'
    GROUP BY customer_id, assigned_at
),

-- What a customer holds from one coupon's arrival until the next one's: the coupons received so
-- far and, since campaign windows follow one another, the latest window among them (the one that
-- can cover a purchase day). A small table: one row per coupon holder and moment of arrival.
held AS (
    SELECT
        customer_id,
        assigned_at AS held_from,
        lead(assigned_at) OVER (PARTITION BY customer_id ORDER BY assigned_at ASC NULLS FIRST) AS held_until,
        sum(coupons) OVER (
            PARTITION BY customer_id ORDER BY assigned_at ASC NULLS FIRST ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS coupons_received,
        max(starts_on) OVER (
            PARTITION BY customer_id ORDER BY assigned_at ASC NULLS FIRST ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS held_starts_on,
        max(ends_on) OVER (
            PARTITION BY customer_id ORDER BY assigned_at ASC NULLS FIRST ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS held_ends_on
    FROM coupon_moments
),

broadcast_days AS (
    SELECT CAST(starts_at AS DATE) AS starts_on, CAST(ends_at AS DATE) AS ends_on
    FROM promotions
    WHERE audience = 'broadcast'
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
    -- A coupon that arrives at the same moment as a purchase counts as received before it.
    CAST(date_diff('day', CAST(h.held_from AS DATE), p.ordered_on) AS INTEGER) AS days_since_last_coupon,
    CAST(coalesce(h.coupons_received, 0) AS BIGINT) AS coupons_received,
    EXISTS (
        SELECT 1 FROM broadcast_days AS d WHERE p.ordered_on BETWEEN d.starts_on AND d.ends_on
    ) OR coalesce(p.ordered_on BETWEEN h.held_starts_on AND h.held_ends_on, false) AS is_promotion_running
FROM purchases AS p
CROSS JOIN bounds AS b
LEFT JOIN held AS h
    ON p.customer_id = h.customer_id
    AND p.ordered_at >= h.held_from
    AND (h.held_until IS NULL OR p.ordered_at < h.held_until)
