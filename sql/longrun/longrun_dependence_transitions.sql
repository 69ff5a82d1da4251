-- Table: longrun_dependence_transitions — customers moving between dependence bands from one
-- quarter with purchases to the next: band_from x band_to per pair of quarters. A customer absent
-- in the earlier quarter is 'new' when their first purchase in the data is in the later one and
-- 'inactive' otherwise; one absent in the later quarter is 'inactive' there (they left, for now).
-- Reads: longrun_dependence
-- Parameters: none
CREATE OR REPLACE TEMP TABLE longrun_dependence_transitions AS
WITH states AS (
    SELECT customer_id, quarter_on, band FROM longrun_dependence
),

quarters AS (
    SELECT DISTINCT quarter_on FROM states
),

pairs AS (
    SELECT quarter_on AS from_on, lead(quarter_on) OVER (ORDER BY quarter_on) AS to_on FROM quarters
),

first_seen AS (
    SELECT customer_id, min(quarter_on) AS first_on FROM states GROUP BY customer_id
),

keyed AS (
    SELECT p.from_on, p.to_on, s.customer_id
    FROM pairs AS p INNER JOIN states AS s ON s.quarter_on = p.from_on
    WHERE p.to_on IS NOT NULL
    UNION
    SELECT p.from_on, p.to_on, s.customer_id
    FROM pairs AS p INNER JOIN states AS s ON s.quarter_on = p.to_on
)

SELECT
    CAST(year(k.from_on) AS VARCHAR) || 'Q' || CAST(quarter(k.from_on) AS VARCHAR) AS quarter_from,
    CAST(year(k.to_on) AS VARCHAR) || 'Q' || CAST(quarter(k.to_on) AS VARCHAR) AS quarter_to,
    k.from_on,
    coalesce(a.band, CASE WHEN f.first_on < k.from_on THEN 'inactive' ELSE 'new' END) AS band_from,
    coalesce(b.band, 'inactive') AS band_to,
    count(*) AS customers
FROM keyed AS k
INNER JOIN first_seen AS f ON f.customer_id = k.customer_id
LEFT JOIN states AS a ON a.customer_id = k.customer_id AND a.quarter_on = k.from_on
LEFT JOIN states AS b ON b.customer_id = k.customer_id AND b.quarter_on = k.to_on
GROUP BY ALL
