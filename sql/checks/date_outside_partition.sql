-- rule: date_outside_partition
-- severity: reject
-- An order line whose order date is not a day its file's folders promise (an export partitioned
-- by order date, tables.transactions.date_partition): a line filed under order_date=2026-01-31/
-- must be dated 2026-01-31. Files are skipped by their folder names alone ([period], build
-- --since), so a misfiled line is rejected rather than trusted; with no date_partition this rule
-- reads an empty table and trips nothing.
-- Reads: staged_transactions, partition_bounds (each dated file's first and last day)
-- Parameters: none
SELECT
    'transactions' AS table_name,
    s._row_id,
    'ordered_at ' || CAST(CAST(s.ordered_at AS DATE) AS VARCHAR) || ' is not in the days of its folder, '
        || CAST(b.first_day AS VARCHAR) || ' to ' || CAST(b.last_day AS VARCHAR) AS detail
FROM staged_transactions AS s
INNER JOIN partition_bounds AS b ON s._source_file = b._source_file
WHERE CAST(s.ordered_at AS DATE) < b.first_day OR CAST(s.ordered_at AS DATE) > b.last_day
