-- rule: duplicate_row
-- severity: reject
-- An exact copy of an earlier row of the same table: the first copy is kept, the others rejected.
-- Rows are grouped per table by a 64-bit hash of all their values; only the rows of repeated
-- hashes are then compared value by value, so a hash collision never rejects a row.
-- Reads: staged_transactions, staged_promotions, staged_assignments, staged_customers, staged_products
-- Parameters: none
WITH repeated_hashes AS (
    SELECT 'transactions' AS table_name, _row_hash FROM staged_transactions GROUP BY _row_hash HAVING count(*) > 1
    UNION ALL
    SELECT 'promotions', _row_hash FROM staged_promotions GROUP BY _row_hash HAVING count(*) > 1
    UNION ALL
    SELECT 'assignments', _row_hash FROM staged_assignments GROUP BY _row_hash HAVING count(*) > 1
    UNION ALL
    SELECT 'customers', _row_hash FROM staged_customers GROUP BY _row_hash HAVING count(*) > 1
    UNION ALL
    SELECT 'products', _row_hash FROM staged_products GROUP BY _row_hash HAVING count(*) > 1
),

candidates AS (
    SELECT s.table_name, s._row_id, s._file_row, s._raw_values
    FROM staged_all AS s
    SEMI JOIN repeated_hashes AS r
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
