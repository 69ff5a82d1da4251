-- Table: longrun_broadcast_daily — one row per calendar day from the data's first order day to the
-- last day analysed: orders placed (return-only orders left out, as in every order count) and net
-- revenue (returns netted in, booked on their order's day). Days without an order are rows of zeros.
-- Reads: orders (panel)
-- Parameters: longrun_through_end (DATE)
CREATE OR REPLACE TEMP TABLE longrun_broadcast_daily AS
WITH bounds AS (
    SELECT min(ordered_on) AS first_on FROM orders
),

days AS (
    SELECT CAST(range AS DATE) AS day_on
    FROM bounds, range(bounds.first_on, getvariable('longrun_through_end') + INTERVAL 1 DAY, INTERVAL 1 DAY)
),

daily AS (
    SELECT
        ordered_on AS day_on,
        count(*) FILTER (WHERE NOT is_return) AS orders,
        sum(net_amount) AS net_amount
    FROM orders
    WHERE ordered_on <= getvariable('longrun_through_end')
    GROUP BY ordered_on
)

SELECT
    d.day_on,
    CAST(coalesce(y.orders, 0) AS BIGINT) AS orders,
    coalesce(y.net_amount, 0.0) AS net_amount
FROM days AS d
LEFT JOIN daily AS y USING (day_on)
ORDER BY d.day_on
