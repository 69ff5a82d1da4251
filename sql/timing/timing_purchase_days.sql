-- Table: timing_purchase_days — one row per customer and purchase day. Orders placed on the same
-- day are merged (a same-day repeat order would be a spell of zero length, which no hazard model
-- can hold; the merged orders are counted in `orders`). Each row carries the days to the next
-- purchase day (to the export's end when none follows), whether the day redeemed a promotion, the
-- last redemption day up to it (start of the post-promotion dip), the customer's block, and the
-- customer's recent purchase rate class: purchase days in the 365 days up to this one, per year
-- of history seen (at most 365 days), cut at its quantiles into rate_classes classes; class 0
-- holds purchase days with less than min_history_days of history (too little to tell a rate).
-- The class adjusts both hazard models for customers' different purchase rates, which would
-- otherwise pull every hazard ratio toward 1 (frequent buyers leave the risk set first).
-- The rate is measured before the exposure: a purchase day inside an exposure period (a
-- promotion's running window and the window after it, timing_exposure_periods) takes the rate of
-- the customer's last purchase day before that period, so the campaign's own purchases never
-- raise the rate its dip is compared against.
-- Reads: purchase_gaps (panel), checked.promotions,
--        timing_exposure_periods (from_day INTEGER, to_day INTEGER: merged, non-overlapping,
--        inclusive, days since 1970-01-01)
-- Parameters: getvariable('timing_n_blocks')  number of customer blocks for the bootstrap
--             getvariable('timing_seed')      seed of the block hash
--             getvariable('timing_dip_after') 'targeted': a redemption is an order carrying a
--                                              targeted promotion (a coupon); 'any': any promotion
--             getvariable('timing_rate_classes'), getvariable('timing_min_history_days')
CREATE OR REPLACE TEMP TABLE timing_purchase_days AS
WITH gaps AS (
    SELECT
        g.customer_id,
        CAST(date_diff('day', DATE '1970-01-01', g.ordered_on) AS INTEGER) AS day_no,
        g.days_to_next_order,
        g.is_next_observed,
        g.is_deal,
        g.promotion_id,
        p.audience
    FROM purchase_gaps AS g
    LEFT JOIN checked.promotions AS p ON g.promotion_id = p.promotion_id
),

days AS (
    SELECT
        customer_id,
        day_no,
        count(*) AS orders,
        -- The day's last order carries the gap to the next purchase day; the others have 0 days.
        max(days_to_next_order) AS gap_days,
        arg_max(is_next_observed, days_to_next_order) AS is_event,
        bool_or(is_deal) AS is_deal,
        bool_or(
            promotion_id IS NOT NULL
            AND (audience = 'targeted' OR getvariable('timing_dip_after') = 'any')
        ) AS is_redemption,
        min(promotion_id) AS promotion_id
    FROM gaps
    GROUP BY customer_id, day_no
),

history AS (
    SELECT
        *,
        max(CASE WHEN is_redemption THEN day_no END) OVER (
            PARTITION BY customer_id ORDER BY day_no ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
        ) AS last_redemption_day,
        count(*) OVER (
            PARTITION BY customer_id ORDER BY day_no RANGE BETWEEN 364 PRECEDING AND CURRENT ROW
        ) AS prior_purchase_days,
        day_no - min(day_no) OVER (PARTITION BY customer_id) AS tenure_days
    FROM days
),

rated AS (
    SELECT
        *,
        CASE WHEN tenure_days >= getvariable('timing_min_history_days')
             THEN prior_purchase_days * 365.0 / least(tenure_days + 1, 365) END AS purchase_rate
    FROM history
),

placed AS (
    SELECT r.*, x.from_day AS exposure_from_day
    FROM rated AS r
    LEFT JOIN timing_exposure_periods AS x ON r.day_no BETWEEN x.from_day AND x.to_day
),

lagged AS (
    SELECT *, lag(purchase_rate) OVER (PARTITION BY customer_id ORDER BY day_no) AS previous_rate
    FROM placed
),

frozen AS (
    SELECT
        * EXCLUDE (purchase_rate),
        CASE WHEN exposure_from_day IS NULL THEN purchase_rate
             ELSE first_value(previous_rate) OVER (PARTITION BY customer_id, exposure_from_day ORDER BY day_no)
        END AS purchase_rate
    FROM lagged
),

edges AS (
    SELECT quantile_cont(
        purchase_rate,
        list_transform(range(1, getvariable('timing_rate_classes')), lambda k: k / getvariable('timing_rate_classes'))
    ) AS rate_edges
    FROM frozen
    WHERE purchase_rate IS NOT NULL
)

SELECT
    r.customer_id,
    r.day_no,
    r.orders,
    r.gap_days,
    r.is_event,
    r.is_deal,
    r.is_redemption,
    r.promotion_id,
    r.last_redemption_day,
    -- The project's hash (the first 60 bits of MD5, the same on every engine), not an engine's own.
    CAST(CAST('0x' || substr(md5(r.customer_id || ':' || CAST(getvariable('timing_seed') AS VARCHAR)), 1, 15) AS BIGINT)
         % getvariable('timing_n_blocks') AS INTEGER) AS block,
    CAST(CASE WHEN r.purchase_rate IS NULL THEN 0
              ELSE 1 + array_length(list_filter(coalesce(e.rate_edges, []), lambda edge: edge < r.purchase_rate)) END
         AS INTEGER) AS rate_class
FROM frozen AS r
CROSS JOIN edges AS e
