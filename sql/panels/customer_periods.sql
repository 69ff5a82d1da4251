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

-- One fact per row, summed per customer-week below.
facts AS (
    SELECT customer_id, week_on, orders, net_amount, discount_amount, deal_orders,
           false AS is_coupon_active, false AS is_holdout_active, 0 AS coupons
    FROM weekly_orders
    UNION ALL
    SELECT customer_id, week_on, 0, 0.0, 0.0, 0, is_coupon_active, is_holdout_active, 0
    FROM assigned_weeks
    UNION ALL
    SELECT customer_id, week_on, 0, 0.0, 0.0, 0, false, false, coupons
    FROM coupon_arrivals
),

weeks AS (
    SELECT
        customer_id,
        week_on,
        sum(orders) AS orders,
        sum(net_amount) AS net_amount,
        sum(discount_amount) AS discount_amount,
        sum(deal_orders) AS deal_orders,
        bool_or(is_coupon_active) AS is_coupon_active,
        bool_or(is_holdout_active) AS is_holdout_active,
        sum(coupons) AS coupons
    FROM facts
    GROUP BY customer_id, week_on
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
    CAST(sum(w.coupons) OVER (
        PARTITION BY w.customer_id ORDER BY w.week_on ASC NULLS FIRST ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
    ) AS BIGINT) AS coupons_received
FROM weeks AS w
LEFT JOIN broadcast_weeks AS b ON w.week_on = b.week_on
