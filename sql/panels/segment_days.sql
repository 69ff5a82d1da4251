-- Panel: segment_days — one row per day and segment with an order line, where a segment is a
-- product category (products.category) or a sales channel (transactions.channel): orders with a
-- purchased line in the segment, net amount (returned lines netted in on their day) and the lines
-- that carried a promotion. The long run's broadcast counterfactual takes the segments a sale did
-- not discount as control series. Lines without a category (or channel) are in no segment of
-- that kind; an export with neither gives an empty panel.
-- Reads: transactions, products (checked inputs)
-- Parameters: none
WITH lines AS (
    SELECT
        CAST(t.ordered_at AS DATE) AS day_on,
        t.order_id,
        t.quantity,
        t.net_amount,
        t.promotion_id,
        t.channel,
        p.category
    FROM transactions AS t
    LEFT JOIN products AS p ON t.product_id = p.product_id
),

segmented AS (
    SELECT day_on, 'category' AS segment_kind, category AS segment, order_id, quantity, net_amount, promotion_id
    FROM lines
    WHERE category IS NOT NULL
    UNION ALL
    SELECT day_on, 'channel' AS segment_kind, channel AS segment, order_id, quantity, net_amount, promotion_id
    FROM lines
    WHERE channel IS NOT NULL
),

-- Each order's lines in a segment on a day first, then the segment's day: counting the distinct
-- orders directly would hold every order id of every segment-day in memory at once.
per_order AS (
    SELECT
        day_on,
        segment_kind,
        segment,
        order_id,
        bool_or(quantity > 0) AS is_purchased,
        sum(net_amount) AS net_amount,
        count(promotion_id) AS deal_lines
    FROM segmented
    GROUP BY day_on, segment_kind, segment, order_id
)

SELECT
    day_on,
    segment_kind,
    segment,
    count(*) FILTER (WHERE is_purchased) AS orders,
    sum(net_amount) AS net_amount,
    CAST(sum(deal_lines) AS BIGINT) AS deal_lines
FROM per_order
GROUP BY day_on, segment_kind, segment
