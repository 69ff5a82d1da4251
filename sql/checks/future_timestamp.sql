-- rule: future_timestamp
-- severity: warn
-- A timestamp later than the moment the check runs: a clock or export fault.
-- Reads: staged_transactions, staged_assignments
-- Parameters: getvariable('checked_at') (the run's start, UTC)
WITH stamped AS (
    SELECT 'transactions' AS table_name, _row_id, 'ordered_at' AS column_name, ordered_at AS stamp
    FROM staged_transactions
    UNION ALL
    SELECT 'assignments', _row_id, 'assigned_at', assigned_at FROM staged_assignments
)

SELECT
    table_name,
    _row_id,
    column_name || ' ' || CAST(stamp AS VARCHAR) || ' is in the future' AS detail
FROM stamped
WHERE stamp > getvariable('checked_at')
