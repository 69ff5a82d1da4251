-- Panel: customer_quarters — customer x calendar quarter in which the customer ordered: orders,
-- deal orders, revenue, deal revenue, discount and the mean depth of the quarter's deals.
-- Reads: orders (panel)
-- Parameters: none
WITH placed AS (
    SELECT
        customer_id,
        CAST(date_trunc('quarter', ordered_on) AS DATE) AS quarter_on,
        net_amount,
        discount_amount,
        is_deal,
        is_return,
        depth
    FROM orders
)

SELECT
    customer_id,
    CAST(year(quarter_on) AS VARCHAR) || 'Q' || CAST(quarter(quarter_on) AS VARCHAR) AS quarter,
    quarter_on,
    count(*) FILTER (WHERE NOT is_return) AS orders,
    count(*) FILTER (WHERE NOT is_return AND is_deal) AS deal_orders,
    sum(net_amount) AS net_amount,
    coalesce(sum(net_amount) FILTER (WHERE is_deal), 0.0) AS deal_net_amount,
    sum(discount_amount) AS discount_amount,
    avg(depth) FILTER (WHERE NOT is_return AND is_deal) AS mean_depth
FROM placed
GROUP BY customer_id, quarter_on
