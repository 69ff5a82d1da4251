-- Panel: customer_quarter_behaviour — customer x calendar quarter with a purchase: how the customer
-- bought within that quarter only (no look-back, so the export's first day biases nothing):
-- purchase days and weeks, the span between the first and last purchase, lines, items, amounts,
-- deal orders and the deepest discount. Return-only orders (net below zero) are left out.
-- Reads: orders (panel)
-- Parameters: none
WITH placed AS (
    SELECT
        customer_id,
        CAST(date_trunc('quarter', ordered_on) AS DATE) AS quarter_on,
        ordered_on,
        -- the purchase's day (0-91) and week (0-13) within its quarter
        CAST(date_diff('day', date_trunc('quarter', ordered_on), ordered_on) AS INTEGER) AS quarter_day,
        CAST(date_diff('day', date_trunc('week', date_trunc('quarter', ordered_on)), date_trunc('week', ordered_on)) / 7
             AS INTEGER) AS quarter_week,
        lines,
        quantity,
        net_amount,
        list_amount,
        discount_amount,
        is_deal,
        depth
    FROM orders
    WHERE NOT is_return
)

SELECT
    customer_id,
    CAST(year(quarter_on) AS VARCHAR) || 'Q' || CAST(quarter(quarter_on) AS VARCHAR) AS quarter,
    quarter_on,
    count(*) AS orders,
    -- Distinct days and weeks as the set bits of masks (days 0-45 and 46-91 of the quarter in two,
    -- weeks in one): one pass, where count(DISTINCT ...) keeps every group's days and weeks.
    CAST(bit_count(bit_or(CASE WHEN quarter_day < 46 THEN CAST(1 AS BIGINT) << quarter_day ELSE 0 END))
         + bit_count(bit_or(CASE WHEN quarter_day >= 46 THEN CAST(1 AS BIGINT) << (quarter_day - 46) ELSE 0 END))
         AS BIGINT) AS purchase_days,
    CAST(bit_count(bit_or(CAST(1 AS BIGINT) << quarter_week)) AS BIGINT) AS purchase_weeks,
    CAST(date_diff('day', min(ordered_on), max(ordered_on)) AS INTEGER) AS active_span_days,
    CAST(sum(lines) AS BIGINT) AS lines,
    sum(quantity) AS quantity,
    sum(net_amount) AS net_amount,
    sum(list_amount) AS list_amount,
    sum(discount_amount) AS discount_amount,
    count(*) FILTER (WHERE is_deal) AS deal_orders,
    coalesce(max(depth), 0.0) AS max_depth
FROM placed
GROUP BY customer_id, quarter_on
