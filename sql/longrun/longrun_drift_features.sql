-- Table: longrun_drift_features — behaviour features of a seeded sample of customers in each whole
-- quarter analysed (the same customers are drawn in every quarter where they bought: the draw
-- orders customers by a seeded hash), for the population-drift classifier. Within-quarter
-- features only: no look-back that the export's first day would cut short.
-- Reads: customer_quarter_behaviour (panel)
-- Parameters: longrun_last_quarter_on (DATE: first day of the last whole quarter analysed),
--             longrun_sample_customers (BIGINT: per quarter), longrun_seed (BIGINT)
CREATE OR REPLACE TEMP TABLE longrun_drift_features AS
WITH ranked AS (
    SELECT
        *,
        row_number() OVER (PARTITION BY quarter_on ORDER BY hash(customer_id, getvariable('longrun_seed')), customer_id)
            AS draw
    FROM customer_quarter_behaviour
    WHERE quarter_on <= getvariable('longrun_last_quarter_on')
)

SELECT
    CAST(dense_rank() OVER (ORDER BY customer_id) AS INTEGER) AS customer_no,
    quarter,
    quarter_on,
    CAST(orders AS DOUBLE) AS orders,
    CAST(purchase_weeks AS DOUBLE) AS purchase_weeks,
    CAST(active_span_days AS DOUBLE) AS active_span_days,
    net_amount / orders AS basket_amount,
    CAST(lines AS DOUBLE) / orders AS lines_per_order,
    quantity / orders AS items_per_order,
    CAST(deal_orders AS DOUBLE) / orders AS deal_share,
    CASE WHEN list_amount > 0 THEN discount_amount / list_amount ELSE 0.0 END AS discount_share,
    max_depth
FROM ranked
WHERE draw <= getvariable('longrun_sample_customers')
