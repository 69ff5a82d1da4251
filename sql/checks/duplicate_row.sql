-- rule: duplicate_row
-- severity: reject
-- An exact copy of an earlier row of the same table: the first copy is kept, the others rejected.
-- Rows are first grouped by a 64-bit hash of their original values, then compared value by value
-- within hash groups of two or more, so a hash collision never rejects a row.
-- Reads: staged_all
-- Parameters: none
WITH hashed AS (
    SELECT table_name, _row_id, _row_hash FROM staged_all
),

repeated_hashes AS (
    SELECT table_name, _row_hash
    FROM hashed
    GROUP BY table_name, _row_hash
    HAVING count(*) > 1
),

candidates AS (
    SELECT s.table_name, s._row_id, s._file_row, s._raw_values
    FROM staged_all AS s
    INNER JOIN repeated_hashes AS r
        ON s.table_name = r.table_name AND s._row_hash = r._row_hash
),

ranked AS (
    SELECT
        table_name,
        _row_id,
        row_number() OVER (PARTITION BY table_name, _raw_values ORDER BY _row_id) AS copy_number,
        first_value(_file_row) OVER (PARTITION BY table_name, _raw_values ORDER BY _row_id) AS first_row
    FROM candidates
)

SELECT
    table_name,
    _row_id,
    'same values as row ' || first_row AS detail
FROM ranked
WHERE copy_number > 1
