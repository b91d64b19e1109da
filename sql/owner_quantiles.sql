-- P10/P50/P90 of each owner's won total and the gap from each to the owner's target.
-- $period: quota period to read from quota_bands (default: 2027-Q1)
-- Tables: pipeline, quota_bands.
WITH q AS (
    SELECT p.owner_id,
           sum(p.amount * p.win_prob) AS expected_value,
           total_quantiles(p.amount, p.win_prob, [0.1, 0.5, 0.9]) AS pq,
           any_value(b.target) AS target
    FROM pipeline AS p
    JOIN quota_bands AS b ON b.owner_id = p.owner_id AND b.period = $period
    GROUP BY p.owner_id
)
SELECT owner_id, target,
       round(expected_value) AS expected_value,
       round(pq[1]) AS p10, round(pq[2]) AS p50, round(pq[3]) AS p90,
       round(pq[1] - target) AS p10_gap, round(pq[2] - target) AS p50_gap,
       round(pq[3] - target) AS p90_gap
FROM q
ORDER BY owner_id;
