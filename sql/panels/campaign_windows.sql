-- Panel: campaign_windows — one row per targeted promotion x assigned customer: the arm, the
-- pre-period features (over pre_period_days before the campaign starts), and the outcomes in
-- the campaign window (its first to last day) and in the window after it (after_days long).
-- A window of the campaign's own length just before it gives the CUPED covariates (pre_*).
-- A targeted promotion without any holdout also gets, in arm 'comparison', every customer who
-- ordered in its pre-period and was not assigned to it: the pool a weighted (not randomised)
-- comparison draws on.
-- Reads: orders, campaign_assignments (panels), transactions, customers (checked inputs)
-- Parameters: getvariable('pre_period_days'), getvariable('after_days')
WITH targeted AS (
    SELECT promotion_id, customer_id, arm, assigned_at, starts_on, ends_on
    FROM campaign_assignments
    WHERE audience = 'targeted'
),

no_holdout AS (
    SELECT promotion_id, min(starts_on) AS starts_on, min(ends_on) AS ends_on
    FROM targeted
    GROUP BY promotion_id
    HAVING count(*) FILTER (WHERE arm = 'holdout') = 0
),

comparison AS (
    SELECT DISTINCT n.promotion_id, o.customer_id, n.starts_on, n.ends_on
    FROM no_holdout AS n
    INNER JOIN orders AS o
        ON o.ordered_on < n.starts_on
        AND o.ordered_on >= n.starts_on - CAST(getvariable('pre_period_days') AS INTEGER)
    WHERE NOT EXISTS (
        SELECT 1 FROM targeted AS t WHERE t.promotion_id = n.promotion_id AND t.customer_id = o.customer_id
    )
),

assigned AS (
    SELECT
        promotion_id,
        customer_id,
        arm,
        assigned_at,
        starts_on,
        ends_on,
        ends_on + CAST(getvariable('after_days') AS INTEGER) AS after_ends_on,
        starts_on - CAST(getvariable('pre_period_days') AS INTEGER) AS pre_period_on,
        starts_on - CAST(date_diff('day', starts_on, ends_on) + 1 AS INTEGER) AS pre_window_on
    FROM (
        SELECT * FROM targeted
        UNION ALL
        SELECT promotion_id, customer_id, 'comparison', CAST(NULL AS TIMESTAMP), starts_on, ends_on FROM comparison
    ) AS both_kinds
),

-- Coupons received before this assignment (treatment arms of earlier assignments).
past_coupons AS (
    SELECT a.promotion_id, a.customer_id, count(e.promotion_id) AS past_coupons
    FROM assigned AS a
    LEFT JOIN campaign_assignments AS e
        ON a.customer_id = e.customer_id AND e.arm = 'treatment' AND e.assigned_at < a.assigned_at
    GROUP BY a.promotion_id, a.customer_id
),

first_seen AS (
    SELECT o.customer_id, least(min(o.ordered_on), min(CAST(c.first_seen_at AS DATE))) AS first_seen_on
    FROM orders AS o
    LEFT JOIN customers AS c ON o.customer_id = c.customer_id
    GROUP BY o.customer_id
),

-- Every order of an assigned customer from the start of the pre-period to the end of the
-- window after the campaign, tagged with the stretch it falls in.
placed AS (
    SELECT
        a.promotion_id,
        a.customer_id,
        o.ordered_on,
        o.net_amount,
        o.margin_amount,
        o.is_deal,
        o.is_return,
        o.ordered_on < a.starts_on AS is_pre_period,
        o.ordered_on >= a.pre_window_on AND o.ordered_on < a.starts_on AS is_pre_window,
        o.ordered_on BETWEEN a.starts_on AND a.ends_on AS is_during,
        o.ordered_on > a.ends_on AND o.ordered_on <= a.after_ends_on AS is_after
    FROM assigned AS a
    INNER JOIN orders AS o
        ON a.customer_id = o.customer_id
        AND o.ordered_on >= least(a.pre_period_on, a.pre_window_on)
        AND o.ordered_on <= a.after_ends_on
),

-- Orders count purchases (return-only orders excluded); amounts net returns in.
stretches AS (
    SELECT
        promotion_id,
        customer_id,
        max(ordered_on) FILTER (WHERE is_pre_period AND NOT is_return) AS last_pre_order_on,
        count(*) FILTER (WHERE is_pre_period AND NOT is_return) AS frequency,
        coalesce(sum(net_amount) FILTER (WHERE is_pre_period), 0.0) AS monetary,
        count(*) FILTER (WHERE is_pre_period AND NOT is_return AND is_deal) AS pre_period_deals,
        count(*) FILTER (WHERE is_pre_window AND NOT is_return) AS pre_orders,
        coalesce(sum(net_amount) FILTER (WHERE is_pre_window), 0.0) AS pre_net_amount,
        coalesce(sum(margin_amount) FILTER (WHERE is_pre_window), 0.0) AS pre_margin_amount,
        count(*) FILTER (WHERE is_during AND NOT is_return) AS during_orders,
        coalesce(sum(net_amount) FILTER (WHERE is_during), 0.0) AS during_net_amount,
        coalesce(sum(margin_amount) FILTER (WHERE is_during), 0.0) AS during_margin_amount,
        count(*) FILTER (WHERE is_after AND NOT is_return) AS after_orders,
        coalesce(sum(net_amount) FILTER (WHERE is_after), 0.0) AS after_net_amount,
        coalesce(sum(margin_amount) FILTER (WHERE is_after), 0.0) AS after_margin_amount
    FROM placed
    GROUP BY promotion_id, customer_id
),

-- Redemption: order lines carrying this promotion in its campaign window.
redemptions AS (
    SELECT
        a.promotion_id,
        a.customer_id,
        sum(t.discount_amount) AS discount_amount
    FROM assigned AS a
    INNER JOIN transactions AS t
        ON a.customer_id = t.customer_id
        AND a.promotion_id = t.promotion_id
        AND CAST(t.ordered_at AS DATE) BETWEEN a.starts_on AND a.ends_on
    GROUP BY a.promotion_id, a.customer_id
)

SELECT
    a.promotion_id,
    a.customer_id,
    a.arm,
    a.arm = 'treatment' AS is_treated,
    a.assigned_at,
    a.starts_on,
    a.ends_on,
    a.after_ends_on,
    CAST(date_diff('day', s.last_pre_order_on, a.starts_on) AS INTEGER) AS recency_days,
    CAST(coalesce(s.frequency, 0) AS BIGINT) AS frequency,
    coalesce(s.monetary, 0.0) AS monetary,
    CASE WHEN f.first_seen_on < a.starts_on
         THEN CAST(date_diff('day', f.first_seen_on, a.starts_on) AS INTEGER) END AS tenure_days,
    CASE WHEN s.frequency > 0 THEN s.pre_period_deals / s.frequency END AS past_deal_share,
    CAST(pc.past_coupons AS BIGINT) AS past_coupons,
    CASE WHEN coalesce(s.pre_orders, 0) > 0 THEN 1 ELSE 0 END AS pre_buyer,
    CAST(coalesce(s.pre_orders, 0) AS BIGINT) AS pre_orders,
    coalesce(s.pre_net_amount, 0.0) AS pre_net_amount,
    coalesce(s.pre_margin_amount, 0.0) AS pre_margin_amount,
    CASE WHEN coalesce(s.during_orders, 0) > 0 THEN 1 ELSE 0 END AS during_buyer,
    CAST(coalesce(s.during_orders, 0) AS BIGINT) AS during_orders,
    coalesce(s.during_net_amount, 0.0) AS during_net_amount,
    coalesce(s.during_margin_amount, 0.0) AS during_margin_amount,
    CASE WHEN coalesce(s.after_orders, 0) > 0 THEN 1 ELSE 0 END AS after_buyer,
    CAST(coalesce(s.after_orders, 0) AS BIGINT) AS after_orders,
    coalesce(s.after_net_amount, 0.0) AS after_net_amount,
    coalesce(s.after_margin_amount, 0.0) AS after_margin_amount,
    CASE WHEN r.customer_id IS NOT NULL THEN 1 ELSE 0 END AS redeemed,
    coalesce(r.discount_amount, 0.0) AS discount_amount
FROM assigned AS a
LEFT JOIN stretches AS s ON a.promotion_id = s.promotion_id AND a.customer_id = s.customer_id
LEFT JOIN past_coupons AS pc ON a.promotion_id = pc.promotion_id AND a.customer_id = pc.customer_id
LEFT JOIN first_seen AS f ON a.customer_id = f.customer_id
LEFT JOIN redemptions AS r ON a.promotion_id = r.promotion_id AND a.customer_id = r.customer_id
