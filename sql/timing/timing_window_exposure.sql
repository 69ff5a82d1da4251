-- Table: timing_window_exposure — per anticipation window: the customers at risk in it (their
-- first purchase day lies before the window) and, among them, the exposed ones (at least
-- min_coupons coupons received by the window's first day), so that a window with too few
-- exposed or unexposed customers is reported as not estimable instead of as a ratio near 1.
-- Reads: timing_expected_starts, timing_purchase_days, timing_customer_changes
-- Parameters: getvariable('timing_min_coupons')
CREATE OR REPLACE TEMP TABLE timing_window_exposure AS
WITH firsts AS (
    SELECT customer_id, min(day_no) AS first_day
    FROM timing_purchase_days
    GROUP BY customer_id
),

received AS (
    SELECT
        customer_id,
        day_no,
        sum(received_change) OVER (
            PARTITION BY customer_id ORDER BY day_no ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS received
    FROM timing_customer_changes
),

reached AS (
    SELECT customer_id, min(day_no) AS exposed_from_day
    FROM received
    WHERE received >= getvariable('timing_min_coupons')
    GROUP BY customer_id
)

SELECT
    x.window_no,
    x.start_day,
    CAST(count(f.customer_id) AS BIGINT) AS customers_at_risk,
    CAST(count(f.customer_id) FILTER (WHERE r.exposed_from_day <= x.window_from_day) AS BIGINT) AS exposed_customers
FROM timing_expected_starts AS x
LEFT JOIN firsts AS f ON f.first_day < x.window_from_day
LEFT JOIN reached AS r ON r.customer_id = f.customer_id
GROUP BY x.window_no, x.start_day
