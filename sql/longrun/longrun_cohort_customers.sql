-- Table: longrun_cohort_customers — one row per customer acquired inside the data up to the through day:
-- the first purchase (day, quarter, whether it was a deal), the repeat-purchase summary the BG/NBD
-- model needs (purchase days after the first, the last purchase day) and the later orders at full price.
-- Reads: orders (panel), checked.customers (first_seen_at, may be empty)
-- Parameters: longrun_through_end (DATE) — last day of the observation period;
--             longrun_burn_in_days (INTEGER) — without first_seen_at, a first order in
--             this many days after the data's first order may be a returning customer's, so it is
--             not counted as an acquisition.
CREATE OR REPLACE TEMP TABLE longrun_cohort_customers AS
WITH purchases AS (
    -- Return-only orders (net below zero) are not purchases.
    SELECT customer_id, order_id, ordered_on, is_deal
    FROM orders
    WHERE NOT is_return AND ordered_on <= getvariable('longrun_through_end')
),

data_start AS (
    SELECT min(ordered_on) AS first_on FROM orders
),

firsts AS (
    SELECT customer_id, min(ordered_on) AS first_ordered_on
    FROM purchases
    GROUP BY customer_id
),

by_customer AS (
    SELECT
        p.customer_id,
        f.first_ordered_on,
        -- several orders on the first day: a deal if any of them was
        bool_or(p.is_deal) FILTER (WHERE p.ordered_on = f.first_ordered_on) AS first_is_deal,
        count(DISTINCT p.ordered_on) - 1 AS repeat_days,
        max(p.ordered_on) AS last_ordered_on,
        count(*) FILTER (WHERE p.ordered_on > f.first_ordered_on) AS later_orders,
        count(*) FILTER (WHERE p.ordered_on > f.first_ordered_on AND NOT p.is_deal) AS later_full_price_orders
    FROM purchases AS p
    JOIN firsts AS f USING (customer_id)
    GROUP BY p.customer_id, f.first_ordered_on
),

seen AS (
    SELECT customer_id, CAST(min(first_seen_at) AS DATE) AS first_seen_on
    FROM checked.customers
    GROUP BY customer_id
)

SELECT
    b.customer_id,
    b.first_ordered_on,
    CAST(year(b.first_ordered_on) AS VARCHAR) || 'Q' || CAST(quarter(b.first_ordered_on) AS VARCHAR) AS first_quarter,
    b.first_is_deal,
    CAST(b.repeat_days AS BIGINT) AS repeat_days,
    b.last_ordered_on,
    CAST(date_diff('day', b.first_ordered_on, b.last_ordered_on) AS INTEGER) AS days_first_to_last,
    CAST(date_diff('day', b.first_ordered_on, getvariable('longrun_through_end')) AS INTEGER) AS days_observed,
    CAST(date_diff('day', b.last_ordered_on, getvariable('longrun_through_end')) AS INTEGER) AS days_since_last,
    CAST(b.later_orders AS BIGINT) AS later_orders,
    CAST(b.later_full_price_orders AS BIGINT) AS later_full_price_orders,
    s.first_seen_on
FROM by_customer AS b
CROSS JOIN data_start AS d
LEFT JOIN seen AS s USING (customer_id)
-- Acquired inside the data: first seen on or after the data's first order day when the export
-- says when; otherwise a first order after the burn-in.
WHERE CASE
    WHEN s.first_seen_on IS NOT NULL THEN s.first_seen_on >= d.first_on
    ELSE b.first_ordered_on >= d.first_on + getvariable('longrun_burn_in_days')
END
