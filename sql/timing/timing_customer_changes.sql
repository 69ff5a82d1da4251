-- Table: timing_customer_changes — one row per customer and day on which the customer's coupon
-- state changes: a treatment-arm coupon becomes usable (held +1, received +1) or its window has
-- closed (held -1 on the day after its last day). A coupon counts as received from the day it
-- can be used: the later of the campaign's first day and the assignment day.
-- Reads: campaign_windows (panel)
-- Parameters: none
CREATE OR REPLACE TEMP TABLE timing_customer_changes AS
WITH coupons AS (
    SELECT
        customer_id,
        CAST(date_diff('day', DATE '1970-01-01', greatest(starts_on, CAST(assigned_at AS DATE))) AS INTEGER) AS opens_day,
        CAST(date_diff('day', DATE '1970-01-01', ends_on) AS INTEGER) + 1 AS closes_day
    FROM campaign_windows
    WHERE is_treated
),

usable AS (
    -- An assignment made after the campaign's last day never gives a usable coupon.
    SELECT * FROM coupons WHERE opens_day < closes_day
),

deltas AS (
    SELECT customer_id, opens_day AS day_no, 1 AS held_change, 1 AS received_change FROM usable
    UNION ALL
    SELECT customer_id, closes_day AS day_no, -1 AS held_change, 0 AS received_change FROM usable
)

SELECT
    customer_id,
    day_no,
    CAST(sum(held_change) AS INTEGER) AS held_change,
    CAST(sum(received_change) AS INTEGER) AS received_change
FROM deltas
GROUP BY customer_id, day_no
