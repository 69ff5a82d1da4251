-- Panel: customer_periods — customer x week (Monday start), for every week in which the customer
-- ordered, received a coupon, or was in the treatment or holdout of a running campaign. A week
-- that is absent had none of these: zero orders and no exposure. (A dense grid of every customer
-- and week would be tens of millions of rows of zeros on a large export; analyses that need the
-- at-risk weeks build them from purchase_gaps.)
-- Reads: orders, campaign_assignments (panels), promotions (checked input)
-- Parameters: none
WITH weekly_orders AS (
    SELECT
        customer_id,
        CAST(date_trunc('week', ordered_on) AS DATE) AS week_on,
        count(*) FILTER (WHERE NOT is_return) AS orders,
        sum(net_amount) AS net_amount,
        sum(discount_amount) AS discount_amount,
        count(*) FILTER (WHERE is_deal AND NOT is_return) AS deal_orders
    FROM orders
    GROUP BY customer_id, 2
),

promotion_weeks AS (
    SELECT
        promotion_id,
        audience,
        CAST(w.week_at AS DATE) AS week_on
    FROM promotions AS p
    CROSS JOIN LATERAL (
        SELECT unnest(generate_series(date_trunc('week', CAST(p.starts_at AS DATE)), date_trunc('week', CAST(p.ends_at AS DATE)), INTERVAL 7 DAY)) AS week_at
    ) AS w
),

broadcast_weeks AS (
    SELECT DISTINCT week_on FROM promotion_weeks WHERE audience = 'broadcast'
),

assigned_weeks AS (
    SELECT
        a.customer_id,
        pw.week_on,
        bool_or(a.arm = 'treatment') AS is_coupon_active,
        bool_or(a.arm = 'holdout') AS is_holdout_active
    FROM campaign_assignments AS a
    INNER JOIN promotion_weeks AS pw ON a.promotion_id = pw.promotion_id
    GROUP BY a.customer_id, pw.week_on
),

-- Coupons received: treatment assignments, in the week they arrive.
coupon_arrivals AS (
    SELECT customer_id, CAST(date_trunc('week', CAST(assigned_at AS DATE)) AS DATE) AS week_on, count(*) AS coupons
    FROM campaign_assignments
    WHERE arm = 'treatment'
    GROUP BY customer_id, 2
),

-- The campaign facts of a customer-week (assigned customers only: a small table).
campaign_weeks AS (
    SELECT
        customer_id,
        week_on,
        bool_or(is_coupon_active) AS is_coupon_active,
        bool_or(is_holdout_active) AS is_holdout_active
    FROM (
        SELECT customer_id, week_on, is_coupon_active, is_holdout_active FROM assigned_weeks
        UNION ALL
        SELECT customer_id, week_on, false, false FROM coupon_arrivals
    ) AS facts
    GROUP BY customer_id, week_on
),

-- Coupons received up to each arrival week, held until the customer's next arrival week.
coupons_held AS (
    SELECT
        customer_id,
        week_on AS held_from_on,
        lead(week_on) OVER (PARTITION BY customer_id ORDER BY week_on ASC NULLS FIRST) AS held_until_on,
        sum(coupons) OVER (
            PARTITION BY customer_id ORDER BY week_on ASC NULLS FIRST ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS coupons_received
    FROM coupon_arrivals
),

-- The weeks with an order beside the weeks with a campaign fact: every customer-week with either.
weeks AS (
    SELECT
        coalesce(o.customer_id, c.customer_id) AS customer_id,
        coalesce(o.week_on, c.week_on) AS week_on,
        coalesce(o.orders, 0) AS orders,
        coalesce(o.net_amount, 0.0) AS net_amount,
        coalesce(o.discount_amount, 0.0) AS discount_amount,
        coalesce(o.deal_orders, 0) AS deal_orders,
        coalesce(c.is_coupon_active, false) AS is_coupon_active,
        coalesce(c.is_holdout_active, false) AS is_holdout_active
    FROM weekly_orders AS o
    FULL OUTER JOIN campaign_weeks AS c ON o.customer_id = c.customer_id AND o.week_on = c.week_on
)

SELECT
    w.customer_id,
    w.week_on,
    CAST(w.orders AS BIGINT) AS orders,
    w.net_amount,
    w.discount_amount,
    CAST(w.deal_orders AS BIGINT) AS deal_orders,
    b.week_on IS NOT NULL AS is_broadcast_running,
    w.is_coupon_active,
    w.is_holdout_active,
    CAST(coalesce(h.coupons_received, 0) AS BIGINT) AS coupons_received
FROM weeks AS w
LEFT JOIN broadcast_weeks AS b ON w.week_on = b.week_on
LEFT JOIN coupons_held AS h
    ON w.customer_id = h.customer_id
    AND w.week_on >= h.held_from_on
    AND (h.held_until_on IS NULL OR w.week_on < h.held_until_on)
