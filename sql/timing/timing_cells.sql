-- Table: timing_cells — sufficient statistics of the discrete-time hazard model: customer-days at
-- risk and next purchases per customer block x period (time since the purchase day, in the
-- periods of timing_periods) x calendar month x anticipation window x purchase rate class x covariate
-- cell. A spell that spans several
-- periods is cut at their edges; a customer-day is one binomial trial.
-- Reads: timing_spells, timing_periods (period INTEGER, period_from INTEGER, period_to INTEGER:
--        days since the purchase day, inclusive), timing_period_days (days_since INTEGER, period INTEGER)
-- Parameters: none
CREATE OR REPLACE TEMP TABLE timing_cells AS
WITH spells AS (
    SELECT
        block, start_days, stop_days, is_event, month_no, window_no, rate_class, promotion_available, in_dip,
        in_dip_during_promotion, in_anticipation, coupons_received, is_exposed
    FROM timing_spells
),

ranged AS (
    SELECT s.*, first_day.period AS first_period, last_day.period AS last_period
    FROM spells AS s
    INNER JOIN timing_period_days AS first_day ON first_day.days_since = s.start_days + 1
    INNER JOIN timing_period_days AS last_day ON last_day.days_since = s.stop_days
),

split AS (
    SELECT *, unnest(range(first_period, last_period + 1)) AS period
    FROM ranged
),

overlap AS (
    SELECT
        s.*,
        least(s.stop_days, b.period_to) - greatest(s.start_days + 1, b.period_from) + 1 AS days_at_risk,
        s.is_event AND s.stop_days BETWEEN b.period_from AND b.period_to AS is_event_here
    FROM split AS s
    INNER JOIN timing_periods AS b ON b.period = s.period
)

SELECT
    block,
    period,
    month_no,
    window_no,
    rate_class,
    promotion_available,
    in_dip,
    in_dip_during_promotion,
    in_anticipation,
    coupons_received,
    is_exposed,
    CAST(sum(days_at_risk) AS BIGINT) AS at_risk,
    CAST(count(*) FILTER (WHERE is_event_here) AS BIGINT) AS events
FROM overlap
GROUP BY ALL
