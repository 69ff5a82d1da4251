-- rule: duplicate_row
-- severity: reject
-- An exact copy of an earlier row of the same table: the first copy is kept, the others rejected.
-- Candidates first: order lines that share their customer, order, time and product (exact
-- copies share every value, so also these four), rows of the other (small) tables that share a
-- 64-bit hash of all their values. Only the candidates are then compared value by value, so a
-- hash collision, or two lines that differ in another value, never rejects a row. Hashing four
-- columns rather than every value and its text costs about a third less on large exports.
-- Reads: staged_transactions, staged_promotions, staged_assignments, staged_customers, staged_products
-- Parameters: none
WITH repeated_lines AS (
    SELECT hash(customer_id, order_id, ordered_at, product_id) AS line_key
    FROM staged_transactions
    GROUP BY 1
    HAVING count(*) > 1
),

candidates AS (
    SELECT 'transactions' AS table_name, _row_id, _file_row, _raw_values
    FROM staged_transactions
    WHERE hash(customer_id, order_id, ordered_at, product_id) IN (SELECT line_key FROM repeated_lines)
    UNION ALL
    SELECT 'promotions', _row_id, _file_row, _raw_values
    FROM staged_promotions
    WHERE _row_hash IN (SELECT _row_hash FROM staged_promotions GROUP BY _row_hash HAVING count(*) > 1)
    UNION ALL
    SELECT 'assignments', _row_id, _file_row, _raw_values
    FROM staged_assignments
    WHERE _row_hash IN (SELECT _row_hash FROM staged_assignments GROUP BY _row_hash HAVING count(*) > 1)
    UNION ALL
    SELECT 'customers', _row_id, _file_row, _raw_values
    FROM staged_customers
    WHERE _row_hash IN (SELECT _row_hash FROM staged_customers GROUP BY _row_hash HAVING count(*) > 1)
    UNION ALL
    SELECT 'products', _row_id, _file_row, _raw_values
    FROM staged_products
    WHERE _row_hash IN (SELECT _row_hash FROM staged_products GROUP BY _row_hash HAVING count(*) > 1)
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
