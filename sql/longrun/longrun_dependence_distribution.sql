-- Table: longrun_dependence_distribution — customers per quarter x bin of the dependence index:
-- bin 0 is exactly 0 (only full-price orders), bin k (1..10) is ((k-1)/10, k/10].
-- Reads: longrun_dependence
-- Parameters: none
CREATE OR REPLACE TEMP TABLE longrun_dependence_distribution AS
SELECT
    quarter,
    quarter_on,
    CAST(CASE WHEN dependence_index <= 0 THEN 0 ELSE least(10, ceil(dependence_index * 10 - 1e-9)) END AS INTEGER) AS bin,
    count(*) AS customers
FROM longrun_dependence
GROUP BY ALL
