-- Table: longrun_week_grid — every week (Monday start) of a seeded sample of customers, from the
-- week after the customer is first seen (first purchase or first campaign assignment: that week
-- is left out, since a first purchase makes its incidence 1 by construction) to the last whole
-- week on or before the last day analysed. customer_periods keeps only weeks with activity; the
-- zero weeks are made here, for the sample only (a dense grid of every customer would be
-- customers x weeks rows).
--   purchased         the customer placed an order that week (0/1)
--   coupon_available  a treatment-arm coupon of the customer's ran on some day of the week
--   coupons_before    treatment-arm coupons whose promotion ended before the week (capped)
--   after_coupon      a coupon of the customer's ended in the dip_days before the week (the
--                     short-run dip after a promotion, kept apart from the long-run drift)
-- Reads: orders, customer_periods, campaign_assignments (panels)
-- Parameters: longrun_through_end (DATE), longrun_sample_customers (BIGINT), longrun_seed (BIGINT),
--             longrun_coupons_cap (INTEGER), longrun_dip_days (INTEGER)
CREATE OR REPLACE TEMP TABLE longrun_week_grid AS
WITH bounds AS (
    -- the last Monday whose week ends on or before the last day analysed
    SELECT CAST(date_trunc('week', getvariable('longrun_through_end') + 1) AS DATE) - 7 AS last_week_on
),

first_seen AS (
    SELECT customer_id, min(seen_on) AS first_on
    FROM (
        SELECT customer_id, ordered_on AS seen_on FROM orders
        UNION ALL
        SELECT customer_id, CAST(assigned_at AS DATE) FROM campaign_assignments
    )
    GROUP BY customer_id
),

sampled AS (
    SELECT
        f.customer_id,
        CAST(date_trunc('week', f.first_on) AS DATE) + 7 AS start_week_on
    FROM first_seen AS f, bounds AS b
    WHERE CAST(date_trunc('week', f.first_on) AS DATE) + 7 <= b.last_week_on
    ORDER BY hash(f.customer_id, getvariable('longrun_seed')), f.customer_id
    LIMIT getvariable('longrun_sample_customers')
),

grid AS (
    SELECT
        s.customer_id,
        CAST(unnest(generate_series(s.start_week_on, b.last_week_on, INTERVAL 7 DAY)) AS DATE) AS week_on
    FROM sampled AS s, bounds AS b
),

coupons AS (
    SELECT a.customer_id, a.starts_on, a.ends_on
    FROM campaign_assignments AS a
    INNER JOIN sampled AS s ON a.customer_id = s.customer_id
    WHERE a.arm = 'treatment'
),

exposure AS (
    SELECT
        g.customer_id,
        g.week_on,
        bool_or(c.starts_on <= g.week_on + 6 AND c.ends_on >= g.week_on) AS coupon_available,
        count(*) FILTER (WHERE c.ends_on < g.week_on) AS coupons_before,
        bool_or(c.ends_on < g.week_on AND c.ends_on >= g.week_on - getvariable('longrun_dip_days')) AS after_coupon
    FROM grid AS g
    INNER JOIN coupons AS c ON g.customer_id = c.customer_id AND c.starts_on <= g.week_on + 6
    GROUP BY g.customer_id, g.week_on
)

SELECT
    CAST(dense_rank() OVER (ORDER BY g.customer_id) AS INTEGER) AS customer_no,
    g.week_on,
    CAST(coalesce(p.orders, 0) > 0 AS INTEGER) AS purchased,
    CAST(coalesce(e.coupon_available, false) AS INTEGER) AS coupon_available,
    CAST(least(coalesce(e.coupons_before, 0), getvariable('longrun_coupons_cap')) AS INTEGER) AS coupons_before,
    CAST(coalesce(e.after_coupon, false) AS INTEGER) AS after_coupon
FROM grid AS g
LEFT JOIN customer_periods AS p ON g.customer_id = p.customer_id AND g.week_on = p.week_on
LEFT JOIN exposure AS e ON g.customer_id = e.customer_id AND g.week_on = e.week_on
