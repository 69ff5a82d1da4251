-- rule: unparseable_optional
-- severity: warn
-- An optional value is present but cannot be read as its type (a depth written '15%', a cost
-- 'abc'). The value is left empty (NULL) and the row is kept, so it never drops the row nor the
-- rows that reference it; the original text is kept in the detail.
-- Reads: staged_all
-- Parameters: none
WITH rows_read AS (
    SELECT table_name, _row_id, _unparseable_optional FROM staged_all
)

SELECT
    table_name,
    _row_id,
    _unparseable_optional || ' cannot be read as its type; left empty, the row is kept' AS detail
FROM rows_read
WHERE _unparseable_optional <> ''
