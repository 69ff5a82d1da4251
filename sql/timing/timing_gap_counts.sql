-- Table: timing_gap_counts — days from a purchase day to the next, counted per customer block,
-- kind of purchase (deal or full price, and the promotion), days and event flag: the input of the
-- Kaplan-Meier curves. Purchase days on the export's last day have no follow-up (0 days) and are
-- left out here; timing_purchase_days counts them.
-- Reads: timing_purchase_days
-- Parameters: none
CREATE OR REPLACE TEMP TABLE timing_gap_counts AS
SELECT
    block,
    is_deal,
    CASE WHEN is_deal THEN promotion_id END AS promotion_id,
    gap_days AS days,
    is_event,
    CAST(count(*) AS BIGINT) AS gaps
FROM timing_purchase_days
WHERE gap_days > 0
GROUP BY ALL
