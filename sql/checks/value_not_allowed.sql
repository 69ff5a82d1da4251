-- rule: value_not_allowed
-- severity: reject
-- An assignment's arm, or a promotion's mechanic or audience, is not one of the contract's values
-- (after the config's value mapping). The allowed lists are bound as variables by the runner,
-- with a text that names the export's own codes where the config maps them.
-- Reads: staged_assignments, staged_promotions
-- Parameters: getvariable('allowed_arm'), getvariable('allowed_mechanic'), getvariable('allowed_audience'),
--             and the same with '_text' (what the message lists)
WITH coded AS (
    SELECT 'assignments' AS table_name, _row_id, 'arm' AS column_name, arm AS value,
           getvariable('allowed_arm') AS allowed, getvariable('allowed_arm_text') AS allowed_text
    FROM staged_assignments
    UNION ALL
    SELECT 'promotions', _row_id, 'mechanic', mechanic, getvariable('allowed_mechanic'),
           getvariable('allowed_mechanic_text')
    FROM staged_promotions
    UNION ALL
    SELECT 'promotions', _row_id, 'audience', audience, getvariable('allowed_audience'),
           getvariable('allowed_audience_text')
    FROM staged_promotions
)

SELECT
    table_name,
    _row_id,
    column_name || ' = ' || value || ' is not ' || allowed_text AS detail
FROM coded
WHERE value IS NOT NULL AND NOT list_contains(allowed, value)
