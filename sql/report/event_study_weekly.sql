-- Table: event_study_weekly — orders per assigned customer in each week around a targeted
-- campaign's start, by arm (the event-study chart of the quarterly report).
-- Week 0 is the seven days from the campaign's first day; week -1 the seven days before it.
-- An arm's customers who did not order in a week count as zero (they are in `customers`).
-- Reads: campaign_assignments, orders (panels)
-- Parameters: promotion_ids (list of promotion ids), weeks_before, weeks_after
WITH assigned AS (
    SELECT promotion_id, customer_id, arm, starts_on
    FROM campaign_assignments
    WHERE list_contains(getvariable('promotion_ids'), promotion_id)
      AND arm IN ('treatment', 'holdout')
),

arm_sizes AS (
    SELECT promotion_id, arm, min(starts_on) AS starts_on, count(*) AS customers
    FROM assigned
    GROUP BY promotion_id, arm
),

export_end AS (
    SELECT max(ordered_on) AS last_on FROM orders
),

customer_weeks AS (
    SELECT
        a.promotion_id,
        a.arm,
        a.customer_id,
        CAST(floor(datediff('day', a.starts_on, o.ordered_on) / 7.0) AS INTEGER) AS week,
        count(*) AS orders
    FROM assigned AS a
    INNER JOIN orders AS o
        ON o.customer_id = a.customer_id
       AND NOT o.is_return   -- return-only orders are not purchases
       AND o.ordered_on >= a.starts_on - 7 * getvariable('weeks_before')
       AND o.ordered_on < a.starts_on + 7 * (getvariable('weeks_after') + 1)
    GROUP BY a.promotion_id, a.arm, a.customer_id, 4
),

weekly AS (
    SELECT promotion_id, arm, week, sum(orders) AS orders, sum(orders * orders) AS orders_squared,
           count(*) AS buyers
    FROM customer_weeks
    GROUP BY promotion_id, arm, week
),

grid AS (
    SELECT s.promotion_id, s.arm, s.starts_on, s.customers, CAST(w.range AS INTEGER) AS week
    FROM arm_sizes AS s
    CROSS JOIN range(-getvariable('weeks_before'), getvariable('weeks_after') + 1) AS w
)

SELECT
    g.promotion_id,
    g.arm,
    g.week,
    CAST(g.starts_on + 7 * g.week AS DATE) AS week_starts_on,
    g.customers,
    coalesce(w.orders, 0) AS orders,
    coalesce(w.orders_squared, 0) AS orders_squared,
    coalesce(w.buyers, 0) AS buyers,
    (g.starts_on + 7 * g.week + 6) <= e.last_on AS is_complete_week
FROM grid AS g
CROSS JOIN export_end AS e
LEFT JOIN weekly AS w
    ON w.promotion_id = g.promotion_id AND w.arm = g.arm AND w.week = g.week
ORDER BY g.promotion_id, g.arm, g.week
