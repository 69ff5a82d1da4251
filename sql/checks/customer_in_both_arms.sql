-- rule: customer_in_both_arms
-- severity: warn
-- A customer assigned to both the treatment and the holdout of one promotion. Kept; the panels
-- use the customer's earliest assignment.
-- Reads: staged_assignments
-- Parameters: none
WITH arms AS (
    SELECT promotion_id, customer_id, count(DISTINCT arm) AS arm_count
    FROM staged_assignments
    WHERE promotion_id IS NOT NULL AND customer_id IS NOT NULL AND arm IS NOT NULL
    GROUP BY promotion_id, customer_id
)

SELECT
    'assignments' AS table_name,
    s._row_id,
    'customer in both arms of promotion ' || s.promotion_id AS detail
FROM staged_assignments AS s
INNER JOIN arms AS a ON s.promotion_id = a.promotion_id AND s.customer_id = a.customer_id
WHERE a.arm_count > 1
