-- rule: missing_required
-- severity: reject
-- A required value is missing: null, or text that is empty or blank.
-- Reads: staged_all (one row per export row of every table, from the source layer)
-- Parameters: none
WITH rows_read AS (
    SELECT table_name, _row_id, _missing FROM staged_all
)
SELECT
    table_name,
    _row_id,
    'missing: ' || _missing AS detail
FROM rows_read
WHERE _missing <> ''
