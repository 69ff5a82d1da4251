-- Panel: customer_periods — customer x week, every week (Monday start) from the customer's first
-- order to the export's last week, with zero-order weeks included (the at-risk weeks that a
-- discrete-time hazard needs), and the promotion exposure of each week.
-- Reads: orders, campaign_assignments (panels), promotions (checked input)
-- Parameters: none
WITH bounds AS (
    SELECT CAST(date_trunc('week', max(ordered_on)) AS DATE) AS last_week_on FROM orders
),

first_weeks AS (
    SELECT customer_id, CAST(date_trunc('week', min(ordered_on)) AS DATE) AS first_week_on
    FROM orders
    GROUP BY customer_id
),

-- Coupons received: treatment assignments, counted from the week they arrive (or the customer's
-- first week, for coupons that arrived before the first order).
coupon_arrivals AS (
    SELECT
        a.customer_id,
        greatest(CAST(date_trunc('week', CAST(a.assigned_at AS DATE)) AS DATE), f.first_week_on) AS week_on,
        count(*) AS coupons
    FROM campaign_assignments AS a
    INNER JOIN first_weeks AS f ON a.customer_id = f.customer_id
    WHERE a.arm = 'treatment'
    GROUP BY a.customer_id, 2
),

-- Each customer's weeks fall into stretches between coupon arrivals, with a constant count of
-- coupons received: the running count is taken over these few rows, not over every week.
stretch_starts AS (
    SELECT customer_id, first_week_on AS week_on, 0 AS coupons FROM first_weeks
    UNION ALL
    SELECT customer_id, week_on, coupons FROM coupon_arrivals
),

stretches AS (
    SELECT
        customer_id,
        week_on AS starts_on,
        sum(coupons) AS coupons_at_start
    FROM stretch_starts
    GROUP BY customer_id, week_on
),

numbered_stretches AS (
    SELECT
        s.customer_id,
        s.starts_on,
        coalesce(lead(s.starts_on) OVER (PARTITION BY s.customer_id ORDER BY s.starts_on ASC NULLS FIRST) - 7, b.last_week_on) AS ends_on,
        sum(s.coupons_at_start) OVER (
            PARTITION BY s.customer_id ORDER BY s.starts_on ASC NULLS FIRST ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS coupons_received
    FROM stretches AS s
    CROSS JOIN bounds AS b
),

weeks AS (
    SELECT s.customer_id, CAST(w.week_at AS DATE) AS week_on, s.coupons_received
    FROM numbered_stretches AS s
    CROSS JOIN LATERAL (
        SELECT unnest(generate_series(CAST(s.starts_on AS TIMESTAMP), CAST(s.ends_on AS TIMESTAMP), INTERVAL 7 DAY)) AS week_at
    ) AS w
),

weekly_orders AS (
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
)

SELECT
    w.customer_id,
    w.week_on,
    coalesce(o.orders, 0) AS orders,
    coalesce(o.net_amount, 0.0) AS net_amount,
    coalesce(o.discount_amount, 0.0) AS discount_amount,
    coalesce(o.deal_orders, 0) AS deal_orders,
    b.week_on IS NOT NULL AS is_broadcast_running,
    coalesce(aw.is_coupon_active, false) AS is_coupon_active,
    coalesce(aw.is_holdout_active, false) AS is_holdout_active,
    CAST(w.coupons_received AS BIGINT) AS coupons_received
FROM weeks AS w
LEFT JOIN weekly_orders AS o ON w.customer_id = o.customer_id AND w.week_on = o.week_on
LEFT JOIN broadcast_weeks AS b ON w.week_on = b.week_on
LEFT JOIN assigned_weeks AS aw ON w.customer_id = aw.customer_id AND w.week_on = aw.week_on
