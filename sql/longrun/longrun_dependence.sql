-- Table: longrun_dependence — customer x quarter with a purchase, up to the last day analysed:
-- orders, deal orders, revenue, deal revenue, depth, and the dependence index
--     index = sum over the quarter's orders of w(order) / orders,
--     w = 0 at full price; min(1, depth / reference_depth) for a deal with a recorded discount;
--         1 for a deal without one (free shipping, bundle: its depth is not measured).
-- Return-only orders (net below zero) are left out, as in every order count.
-- Reads: orders (panel)
-- Parameters: longrun_through_end (DATE), longrun_reference_depth (DOUBLE),
--             longrun_dependent_threshold (DOUBLE), longrun_n_blocks (INTEGER), longrun_seed (BIGINT)
CREATE OR REPLACE TEMP TABLE longrun_dependence AS
WITH placed AS (
    SELECT
        customer_id,
        CAST(date_trunc('quarter', ordered_on) AS DATE) AS quarter_on,
        net_amount,
        is_deal,
        coalesce(depth, 0.0) AS depth
    FROM orders
    WHERE NOT is_return AND ordered_on <= getvariable('longrun_through_end')
),

weighted AS (
    SELECT
        *,
        CASE
            WHEN NOT is_deal THEN 0.0
            WHEN depth <= 0 THEN 1.0  -- a deal with no discount recorded: counted as a full deal
            ELSE least(1.0, depth / getvariable('longrun_reference_depth'))
        END AS deal_weight
    FROM placed
),

per_quarter AS (
    SELECT
        customer_id,
        quarter_on,
        count(*) AS orders,
        count(*) FILTER (WHERE is_deal) AS deal_orders,
        sum(net_amount) AS net_amount,
        coalesce(sum(net_amount) FILTER (WHERE is_deal), 0.0) AS deal_net_amount,
        coalesce(sum(depth) FILTER (WHERE is_deal), 0.0) AS deal_depth_sum,
        sum(deal_weight) / count(*) AS dependence_index
    FROM weighted
    GROUP BY customer_id, quarter_on
)

SELECT
    customer_id,
    CAST(year(quarter_on) AS VARCHAR) || 'Q' || CAST(quarter(quarter_on) AS VARCHAR) AS quarter,
    quarter_on,
    CAST(hash(customer_id, getvariable('longrun_seed')) % getvariable('longrun_n_blocks') AS INTEGER) AS block,
    orders,
    deal_orders,
    net_amount,
    deal_net_amount,
    deal_depth_sum,
    dependence_index,
    CASE
        WHEN deal_orders = 0 THEN 'full_price'
        WHEN dependence_index >= getvariable('longrun_dependent_threshold') THEN 'dependent'
        ELSE 'occasional'
    END AS band
FROM per_quarter
