-- View: timing_spells — each customer's time between purchase days, cut into spells on which every
-- covariate is constant. A spell covers days (start_days, stop_days] counted from the purchase day
-- (day 1 is the day after it); is_event marks a next purchase on day stop_days. Covariates:
--   promotion_available     a broadcast sale runs or the customer holds a usable coupon
--   in_dip                  within dip_days after a redemption, on a day no promotion is available
--   in_dip_during_promotion within dip_days after a redemption while a promotion is available
--   in_anticipation         in the window before an expected campaign start, the customer has
--                           received at least min_coupons coupons and holds none
--   is_exposed              the customer has received at least min_coupons coupons (the exposed
--                           group of the anticipation contrast, in and out of the windows)
--   window_no               the anticipation window the day lies in (0: none); the hazard models
--                           take it as a factor, so calendar effects shared by everyone in a
--                           window cancel and in_anticipation is an exposed x window interaction
--   coupons_received        coupons received so far, capped at coupons_cap
--   month_no                calendar month (year * 12 + month - 1), for the seasonal adjustment
--   rate_class              the customer's recent purchase rate class on the purchase day
-- A view, not a table: at scale it streams into timing_cells without being stored.
-- Reads: timing_purchase_days, timing_customer_changes, timing_calendar
-- Parameters: getvariable('timing_dip_days'), getvariable('timing_min_coupons'),
--             getvariable('timing_coupons_cap')
CREATE OR REPLACE TEMP VIEW timing_spells AS
WITH boundaries AS (
    -- A boundary on day b: from day b on, something may differ. The day after a purchase day
    -- opens a new gap (the purchase day itself is the last day of the previous gap).
    SELECT customer_id, day_no + 1 AS day_no, day_no AS purchase_day, 0 AS held_change, 0 AS received_change
    FROM timing_purchase_days
    UNION ALL
    SELECT customer_id, day_no, NULL, held_change, received_change
    FROM timing_customer_changes
    UNION ALL
    -- The day after a post-promotion dip ends.
    SELECT customer_id, day_no + getvariable('timing_dip_days') + 1, NULL, 0, 0
    FROM timing_purchase_days
    WHERE is_redemption
),

merged AS (
    SELECT
        customer_id,
        day_no,
        max(purchase_day) AS purchase_day,
        sum(held_change) AS held_change,
        sum(received_change) AS received_change
    FROM boundaries
    GROUP BY customer_id, day_no
),

running AS (
    SELECT
        customer_id,
        day_no AS from_day,
        lead(day_no) OVER by_day AS next_boundary,
        max(purchase_day) OVER so_far AS purchase_day,
        sum(held_change) OVER so_far AS coupons_held,
        sum(received_change) OVER so_far AS coupons_received
    FROM merged
    WINDOW
        by_day AS (PARTITION BY customer_id ORDER BY day_no),
        so_far AS (PARTITION BY customer_id ORDER BY day_no ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW)
),

segments AS (
    -- Days from_day .. to_day - 1 of one gap with the customer's coupon state constant. Before
    -- the first purchase nobody is at risk; after the export's end nothing is observed.
    SELECT
        r.customer_id,
        p.block,
        p.rate_class,
        r.purchase_day,
        p.gap_days,
        p.is_event,
        p.last_redemption_day,
        r.from_day,
        least(coalesce(r.next_boundary, r.purchase_day + p.gap_days + 1), r.purchase_day + p.gap_days + 1) AS to_day,
        r.coupons_held,
        r.coupons_received
    FROM running AS r
    INNER JOIN timing_purchase_days AS p ON p.customer_id = r.customer_id AND p.day_no = r.purchase_day
    WHERE r.purchase_day IS NOT NULL
),

change_days AS (
    SELECT changes_through AS change_no, day_no FROM timing_calendar WHERE is_change
),

numbered AS (
    -- Calendar changes strictly inside a segment have numbers first_change + 1 .. last_change.
    SELECT s.*, c_from.changes_through AS first_change, c_to.changes_through AS last_change
    FROM segments AS s
    INNER JOIN timing_calendar AS c_from ON c_from.day_no = s.from_day
    INNER JOIN timing_calendar AS c_to ON c_to.day_no = s.to_day - 1
    WHERE s.from_day < s.to_day
),

split AS (
    SELECT *, unnest(range(first_change, last_change + 1)) AS change_no
    FROM numbered
),

pieces AS (
    SELECT
        s.*,
        CASE WHEN s.change_no = s.first_change THEN s.from_day ELSE c_start.day_no END AS piece_from,
        CASE WHEN s.change_no = s.last_change THEN s.to_day ELSE c_end.day_no END AS piece_to
    FROM split AS s
    LEFT JOIN change_days AS c_start ON c_start.change_no = s.change_no
    LEFT JOIN change_days AS c_end ON c_end.change_no = s.change_no + 1
),

flagged AS (
    SELECT
        p.customer_id,
        p.block,
        p.rate_class,
        p.purchase_day,
        p.piece_from - p.purchase_day - 1 AS start_days,
        p.piece_to - p.purchase_day - 1 AS stop_days,
        p.is_event AND p.piece_to = p.purchase_day + p.gap_days + 1 AS is_event,
        c.month_no,
        c.window_no,
        p.coupons_received >= getvariable('timing_min_coupons') AS is_exposed,
        c.is_broadcast_running OR p.coupons_held > 0 AS is_promotion,
        p.last_redemption_day IS NOT NULL
            AND p.piece_from - p.last_redemption_day <= getvariable('timing_dip_days') AS is_dip,
        c.is_anticipation_window
            AND p.coupons_received >= getvariable('timing_min_coupons')
            AND p.coupons_held = 0 AS is_anticipating,
        least(p.coupons_received, getvariable('timing_coupons_cap')) AS coupons_received
    FROM pieces AS p
    INNER JOIN timing_calendar AS c ON c.day_no = p.piece_from
)

SELECT
    customer_id,
    block,
    rate_class,
    purchase_day,
    CAST(start_days AS INTEGER) AS start_days,
    CAST(stop_days AS INTEGER) AS stop_days,
    is_event,
    month_no,
    window_no,
    CAST(is_promotion AS INTEGER) AS promotion_available,
    CAST(is_dip AND NOT is_promotion AS INTEGER) AS in_dip,
    CAST(is_dip AND is_promotion AS INTEGER) AS in_dip_during_promotion,
    CAST(is_anticipating AS INTEGER) AS in_anticipation,
    CAST(coupons_received AS INTEGER) AS coupons_received,
    CAST(is_exposed AS INTEGER) AS is_exposed
FROM flagged
