-- Panel: orders — one row per order: its lines summed (returned lines netted, never dropped),
-- its cost and margin after discount, whether it was a deal, and how deep.
-- Reads: transactions, products (checked inputs)
-- Parameters: getvariable('margin_rate') — stands in for products.unit_cost where that is absent
--             (cost = list_amount x (1 - margin_rate)); null when neither is known.
WITH lines AS (
    SELECT
        t.order_id,
        t.customer_id,
        t.ordered_at,
        t.quantity,
        t.net_amount,
        t.list_amount,
        t.discount_amount,
        t.promotion_id,
        p.unit_cost
    FROM transactions AS t
    LEFT JOIN products AS p ON t.product_id = p.product_id
),

costed AS (
    SELECT
        *,
        CASE
            WHEN unit_cost IS NOT NULL THEN unit_cost * quantity
            ELSE list_amount * (1 - getvariable('margin_rate'))
        END AS cost_amount
    FROM lines
),

-- An order id is only unique within a customer in some exports: the key is the pair.
by_order AS (
    SELECT
        customer_id,
        order_id,
        min(ordered_at) AS ordered_at,
        count(*) AS lines,
        sum(quantity) AS quantity,
        sum(net_amount) AS net_amount,
        sum(list_amount) AS list_amount,
        sum(discount_amount) AS discount_amount,
        -- One line of unknown cost makes the order's cost unknown (sum() would skip it).
        CASE WHEN count(cost_amount) = count(*) THEN sum(cost_amount) END AS cost_amount,
        bool_or(promotion_id IS NOT NULL OR discount_amount > 0) AS is_deal,
        -- An order rarely carries two promotions; when it does, the first id in sort order
        -- stands for it (its lines keep their own, and campaign_windows reads those).
        min(promotion_id) AS promotion_id
    FROM costed
    GROUP BY customer_id, order_id
)

SELECT
    order_id,
    customer_id,
    ordered_at,
    CAST(ordered_at AS DATE) AS ordered_on,
    lines,
    quantity,
    net_amount,
    list_amount,
    discount_amount,
    cost_amount,
    net_amount - cost_amount AS margin_amount,
    is_deal,
    -- Below minus half a cent: lines that cancel exactly (59.94 + 89.02 - 148.96) sum to 0 or to
    -- -3e-14 depending on the order a parallel sum adds them (between runs, and between DuckDB
    -- and Spark), which must not make a return.
    net_amount < -0.005 AS is_return,
    promotion_id,
    CASE WHEN list_amount > 0 THEN greatest(discount_amount, 0) / list_amount ELSE 0.0 END AS depth
FROM by_order
