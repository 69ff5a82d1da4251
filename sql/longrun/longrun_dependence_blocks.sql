-- Table: longrun_dependence_blocks — sums per quarter x customer block: the sufficient statistics
-- of every share in dependence_by_quarter, so that the customer-block bootstrap resamples 64
-- rows a quarter instead of every customer.
-- Reads: longrun_dependence
-- Parameters: none
CREATE OR REPLACE TEMP TABLE longrun_dependence_blocks AS
SELECT
    quarter,
    quarter_on,
    block,
    count(*) AS customers,
    sum(orders) AS orders,
    sum(deal_orders) AS deal_orders,
    sum(net_amount) AS net_amount,
    sum(deal_net_amount) AS deal_net_amount,
    sum(deal_depth_sum) AS deal_depth_sum,
    count(*) FILTER (WHERE deal_orders = orders) AS deal_only_customers,
    count(*) FILTER (WHERE deal_orders = 0) AS full_price_customers,
    count(*) FILTER (WHERE band = 'dependent') AS dependent_customers,
    sum(dependence_index) AS dependence_index_sum
FROM longrun_dependence
GROUP BY quarter, quarter_on, block
