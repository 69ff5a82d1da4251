-- Table: timing_cox_sample — the customers the Cox model is fitted on: a seeded sample stratified
-- by coupons received (0, 1, .., min_coupons or more) and by whether the customer ever redeemed,
-- with proportional allocation (each stratum keeps the same share, so no weights are needed).
-- All customers when there are fewer than the sample size.
-- Reads: timing_purchase_days, campaign_windows (panel)
-- Parameters: getvariable('timing_sample_customers'), getvariable('timing_seed'),
--             getvariable('timing_min_coupons')
CREATE OR REPLACE TEMP TABLE timing_cox_sample AS
WITH customers AS (
    SELECT customer_id, bool_or(is_redemption) AS has_redeemed
    FROM timing_purchase_days
    GROUP BY customer_id
),

coupons AS (
    SELECT customer_id, count(*) AS coupons
    FROM campaign_windows
    WHERE is_treated
    GROUP BY customer_id
),

strata AS (
    SELECT
        c.customer_id,
        c.has_redeemed,
        CAST(least(coalesce(k.coupons, 0), getvariable('timing_min_coupons')) AS INTEGER) AS coupon_tier
    FROM customers AS c
    LEFT JOIN coupons AS k ON k.customer_id = c.customer_id
),

ranked AS (
    SELECT
        *,
        row_number() OVER (
            PARTITION BY coupon_tier, has_redeemed
            ORDER BY CAST('0x' || substr(md5(customer_id || ':' || CAST(getvariable('timing_seed') + 1 AS VARCHAR)), 1, 15) AS BIGINT),
                     customer_id
        ) AS draw_order,
        count(*) OVER (PARTITION BY coupon_tier, has_redeemed) AS stratum_size,
        count(*) OVER () AS population
    FROM strata
)

SELECT customer_id, coupon_tier, has_redeemed, stratum_size, population
FROM ranked
WHERE draw_order <= round(stratum_size * least(1.0, getvariable('timing_sample_customers') / population))
