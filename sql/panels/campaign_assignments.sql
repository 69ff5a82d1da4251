-- Panel: campaign_assignments — one row per promotion x assigned customer: the customer's
-- earliest assignment to it (a customer assigned twice, see the customer_in_both_arms warning,
-- counts in the arm of the first assignment), with the promotion's days and audience.
-- Reads: assignments, promotions (checked inputs)
-- Parameters: none
WITH ranked AS (
    SELECT
        promotion_id,
        customer_id,
        arm,
        assigned_at,
        row_number() OVER (
            PARTITION BY promotion_id, customer_id ORDER BY assigned_at ASC NULLS FIRST, arm ASC NULLS FIRST
        ) AS assignment_number
    FROM assignments
)

SELECT
    r.promotion_id,
    r.customer_id,
    r.arm,
    r.assigned_at,
    p.audience,
    CAST(p.starts_at AS DATE) AS starts_on,
    CAST(p.ends_at AS DATE) AS ends_on
FROM ranked AS r
INNER JOIN promotions AS p ON r.promotion_id = p.promotion_id
WHERE r.assignment_number = 1
