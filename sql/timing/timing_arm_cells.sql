-- Table: timing_arm_cells — sufficient statistics of the randomised timing contrasts: per targeted
-- promotion with a randomised holdout x arm x customer block, the assigned customers, their
-- orders and customer-days in the campaign window and in the window after it. Every assigned
-- customer counts in the arm they were assigned to, whether or not they redeemed (intention to
-- treat). Windows are cut at the export's last day, the same for both arms; a campaign whose
-- after-window has not begun by then has 0 days after it. Campaigns without a holdout (arm
-- 'comparison' in campaign_windows) are left out: their comparison is not randomised.
-- Reads: campaign_windows, purchase_gaps (panels)
-- Parameters: getvariable('timing_n_blocks'), getvariable('timing_seed')  (the block of a customer
--             is the same hash as in timing_purchase_days)
CREATE OR REPLACE TEMP TABLE timing_arm_cells AS
WITH bounds AS (
    -- The export's last order day, as purchase_gaps censors at it.
    SELECT max(ordered_on + days_to_next_order) AS export_end_on FROM purchase_gaps
),

randomised AS (
    SELECT promotion_id
    FROM campaign_windows
    GROUP BY promotion_id
    HAVING count(*) FILTER (WHERE arm = 'holdout') > 0 AND count(*) FILTER (WHERE arm = 'treatment') > 0
),

assigned AS (
    SELECT
        w.promotion_id,
        w.customer_id,
        w.is_treated,
        w.during_orders,
        w.after_orders,
        greatest(date_diff('day', w.starts_on, least(w.ends_on, b.export_end_on)) + 1, 0) AS during_days,
        greatest(date_diff('day', w.ends_on, least(w.after_ends_on, b.export_end_on)), 0) AS after_days
    FROM campaign_windows AS w
    CROSS JOIN bounds AS b
    WHERE w.arm IN ('treatment', 'holdout')
        AND w.promotion_id IN (SELECT promotion_id FROM randomised)
)

SELECT
    promotion_id,
    CAST(is_treated AS INTEGER) AS is_treated,
    -- The project's hash (the first 60 bits of MD5, the same on every engine), as in timing_purchase_days.
    CAST(CAST('0x' || substr(md5(customer_id || ':' || CAST(getvariable('timing_seed') AS VARCHAR)), 1, 15) AS BIGINT)
         % getvariable('timing_n_blocks') AS INTEGER) AS block,
    CAST(count(*) AS BIGINT) AS customers,
    CAST(sum(during_orders) AS BIGINT) AS during_orders,
    CAST(sum(during_days) AS BIGINT) AS during_days,
    CAST(sum(after_orders) AS BIGINT) AS after_orders,
    CAST(sum(after_days) AS BIGINT) AS after_days
FROM assigned
GROUP BY ALL
