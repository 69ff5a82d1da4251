-- Table: timing_calendar — one row per day from the first purchase to the day after the export's
-- end: whether a broadcast sale runs, which anticipation window before an expected campaign start
-- the day lies in (window_no, 0 for none), the calendar month, and a running count of the days on
-- which any of these changes (spells are cut at those days by number, without a range join).
-- Reads: timing_purchase_days, checked.promotions,
--        timing_expected_starts (window_no INTEGER, start_day INTEGER, window_from_day INTEGER,
--        window_to_day INTEGER: the windows before the expected starts, already cut clear of other
--        promotions' running and after-windows, days since 1970-01-01, inclusive)
-- Parameters: none
CREATE OR REPLACE TEMP TABLE timing_calendar AS
WITH span AS (
    SELECT min(day_no) AS first_day, max(day_no + gap_days) + 1 AS last_day
    FROM timing_purchase_days
),

days AS (
    SELECT CAST(t.day_no AS INTEGER) AS day_no
    FROM (SELECT unnest(range(first_day, last_day + 1)) AS day_no FROM span) AS t
),

broadcasts AS (
    SELECT
        CAST(date_diff('day', DATE '1970-01-01', CAST(starts_at AS DATE)) AS INTEGER) AS from_day,
        CAST(date_diff('day', DATE '1970-01-01', CAST(ends_at AS DATE)) AS INTEGER) AS to_day  -- inclusive
    FROM checked.promotions
    WHERE audience = 'broadcast'
),

flags AS (
    SELECT
        d.day_no,
        EXISTS (
            SELECT 1 FROM broadcasts AS b WHERE d.day_no BETWEEN b.from_day AND b.to_day
        ) AS is_broadcast_running,
        coalesce((
            SELECT max(x.window_no) FROM timing_expected_starts AS x
            WHERE d.day_no BETWEEN x.window_from_day AND x.window_to_day
        ), 0) AS window_no,
        CAST(year(DATE '1970-01-01' + d.day_no) * 12 + month(DATE '1970-01-01' + d.day_no) - 1 AS INTEGER) AS month_no
    FROM days AS d
),

marked AS (
    SELECT
        *,
        coalesce(
            is_broadcast_running <> lag(is_broadcast_running) OVER by_day
            OR window_no <> lag(window_no) OVER by_day
            OR month_no <> lag(month_no) OVER by_day,
            false
        ) AS is_change
    FROM flags
    WINDOW by_day AS (ORDER BY day_no)
)

SELECT
    day_no,
    is_broadcast_running,
    window_no > 0 AS is_anticipation_window,
    CAST(window_no AS INTEGER) AS window_no,
    month_no,
    is_change,
    CAST(sum(CAST(is_change AS INTEGER)) OVER (ORDER BY day_no ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) AS INTEGER)
        AS changes_through
FROM marked
