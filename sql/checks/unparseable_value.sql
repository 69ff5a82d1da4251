-- rule: unparseable_value
-- severity: reject
-- A value is present but cannot be read as its contract type (a date that is not a date, a
-- number with a stray character); the original text is kept in the rejects table.
-- Reads: staged_all
-- Parameters: none
WITH rows_read AS (
    SELECT table_name, _row_id, _unparseable FROM staged_all
)
SELECT
    table_name,
    _row_id,
    'cannot parse: ' || _unparseable AS detail
FROM rows_read
WHERE _unparseable <> ''
