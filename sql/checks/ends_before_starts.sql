-- rule: ends_before_starts
-- severity: reject
-- A promotion whose last day comes before its first day cannot be placed on the calendar.
-- Reads: staged_promotions
-- Parameters: none
WITH promotions_read AS (
    SELECT _row_id, promotion_id, starts_at, ends_at FROM staged_promotions
)

SELECT
    'promotions' AS table_name,
    _row_id,
    'promotion ' || promotion_id || ' ends ' || CAST(ends_at AS VARCHAR)
        || ' before it starts ' || CAST(starts_at AS VARCHAR) AS detail
FROM promotions_read
WHERE CAST(ends_at AS DATE) < CAST(starts_at AS DATE)
