-- Panel: customer_periods — customer x week, every week (Monday start) from the customer's first
-- order to the export's last week, with zero-order weeks included (the at-risk weeks that a
-- discrete-time hazard needs), and the promotion exposure of each week.
-- Reads: orders (panel), promotions, assignments (checked inputs)
-- Parameters: none
WITH bounds AS (
    SELECT CAST(date_trunc('week', max(ordered_on)) AS DATE) AS last_week_on FROM orders
),

first_weeks AS (
    SELECT customer_id, CAST(date_trunc('week', min(ordered_on)) AS DATE) AS first_week_on
    FROM orders
    GROUP BY customer_id
),

weeks AS (
    SELECT f.customer_id, CAST(w.week_at AS DATE) AS week_on
    FROM first_weeks AS f
    CROSS JOIN bounds AS b
    CROSS JOIN LATERAL (
        SELECT unnest(generate_series(CAST(f.first_week_on AS TIMESTAMP), CAST(b.last_week_on AS TIMESTAMP), INTERVAL 7 DAY)) AS week_at
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
    GROUP BY ALL
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

-- A customer may be assigned twice to one promotion (see the customer_in_both_arms warning):
-- the earliest assignment counts.
first_assignments AS (
    SELECT promotion_id, customer_id, arg_min(arm, assigned_at) AS arm, min(assigned_at) AS assigned_at
    FROM assignments
    GROUP BY promotion_id, customer_id
),

assigned_weeks AS (
    SELECT
        a.customer_id,
        pw.week_on,
        bool_or(a.arm = 'treatment') AS is_coupon_active,
        bool_or(a.arm = 'holdout') AS is_holdout_active
    FROM first_assignments AS a
    INNER JOIN promotion_weeks AS pw ON a.promotion_id = pw.promotion_id
    GROUP BY ALL
),

-- Coupons received: treatment assignments, counted from the week they arrive (or the customer's
-- first week, for coupons that arrived before the first order).
coupon_arrivals AS (
    SELECT
        a.customer_id,
        greatest(CAST(date_trunc('week', CAST(a.assigned_at AS DATE)) AS DATE), f.first_week_on) AS week_on,
        count(*) AS coupons
    FROM first_assignments AS a
    INNER JOIN first_weeks AS f ON a.customer_id = f.customer_id
    WHERE a.arm = 'treatment'
    GROUP BY ALL
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
    CAST(sum(coalesce(c.coupons, 0)) OVER (
        PARTITION BY w.customer_id ORDER BY w.week_on ASC NULLS FIRST ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
    ) AS BIGINT) AS coupons_received
FROM weeks AS w
LEFT JOIN weekly_orders AS o ON w.customer_id = o.customer_id AND w.week_on = o.week_on
LEFT JOIN broadcast_weeks AS b ON w.week_on = b.week_on
LEFT JOIN assigned_weeks AS aw ON w.customer_id = aw.customer_id AND w.week_on = aw.week_on
LEFT JOIN coupon_arrivals AS c ON w.customer_id = c.customer_id AND w.week_on = c.week_on
-- (week_on is never null: NULLS FIRST only spares engines whose default differs a translation.)
