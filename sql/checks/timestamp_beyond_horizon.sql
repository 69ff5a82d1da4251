-- rule: timestamp_beyond_horizon
-- severity: reject
-- A timestamp so far in the future or the past that it can only be a fault (a placeholder such
-- as 2099-12-31 or 1900-01-01, a mistyped year). One such row would stretch the timeline of every
-- customer (gaps censored at the last order date), so it is rejected rather than kept.
-- Order lines and assignments are events that happened: later than the check's time plus
-- checks.future_days is beyond the horizon. Promotions are planned: checks.promotion_future_days.
-- Anything earlier than the check's time minus checks.past_years is beyond the horizon.
-- Reads: staged_transactions, staged_assignments, staged_promotions
-- Parameters: getvariable('horizon_earliest'), getvariable('horizon_latest'),
--             getvariable('horizon_promotion_latest') (timestamps, set by the runner from [checks])
WITH stamped AS (
    SELECT 'transactions' AS table_name, _row_id, 'ordered_at' AS column_name, ordered_at AS stamp,
           getvariable('horizon_latest') AS latest, 'checks.future_days' AS latest_key
    FROM staged_transactions
    UNION ALL
    SELECT 'assignments', _row_id, 'assigned_at', assigned_at, getvariable('horizon_latest'), 'checks.future_days'
    FROM staged_assignments
    UNION ALL
    SELECT 'promotions', _row_id, 'starts_at', starts_at, getvariable('horizon_promotion_latest'),
           'checks.promotion_future_days'
    FROM staged_promotions
    UNION ALL
    SELECT 'promotions', _row_id, 'ends_at', ends_at, getvariable('horizon_promotion_latest'),
           'checks.promotion_future_days'
    FROM staged_promotions
),

beyond AS (
    SELECT
        table_name,
        _row_id,
        column_name,
        CASE
            WHEN stamp > latest THEN column_name || ' ' || CAST(stamp AS VARCHAR) || ' is later than the horizon '
                || CAST(CAST(latest AS DATE) AS VARCHAR) || ' (' || latest_key || ')'
            WHEN stamp < getvariable('horizon_earliest') THEN column_name || ' ' || CAST(stamp AS VARCHAR)
                || ' is earlier than the horizon ' || CAST(CAST(getvariable('horizon_earliest') AS DATE) AS VARCHAR)
                || ' (checks.past_years)'
        END AS detail
    FROM stamped
    WHERE stamp IS NOT NULL
)

SELECT
    table_name,
    _row_id,
    string_agg(detail, '; ' ORDER BY column_name) AS detail
FROM beyond
WHERE detail IS NOT NULL
GROUP BY table_name, _row_id
