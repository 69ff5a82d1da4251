-- rule: duplicate_key
-- severity: reject
-- A promotion, customer or product listed twice with different values: the first row (in file
-- order) is kept and later ones are rejected, so that every join on the key stays one-to-one.
-- Exact copies are already rejected by duplicate_row.
-- Reads: staged_promotions, staged_customers, staged_products
-- Parameters: none
WITH keyed AS (
    SELECT 'promotions' AS table_name, _row_id, _file_row, promotion_id AS key_value FROM staged_promotions
    UNION ALL
    SELECT 'customers', _row_id, _file_row, customer_id FROM staged_customers
    UNION ALL
    SELECT 'products', _row_id, _file_row, product_id FROM staged_products
),

ranked AS (
    SELECT
        table_name,
        _row_id,
        key_value,
        row_number() OVER (PARTITION BY table_name, key_value ORDER BY _row_id) AS copy_number,
        first_value(_file_row) OVER (PARTITION BY table_name, key_value ORDER BY _row_id) AS first_row
    FROM keyed
    WHERE key_value IS NOT NULL
)

SELECT
    table_name,
    _row_id,
    'key ' || key_value || ' already given in row ' || first_row AS detail
FROM ranked
WHERE copy_number > 1
