-- P10/P50/P90 of each owner's won total and the gap from each to the owner's target.
-- reads: pipeline(owner_id, amount number, win_prob number; deal_id)
-- reads: ; quota_bands(owner_id; target number, period)
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- An owner without a target (or without quota_bands) gets NULL gaps.
WITH quota AS (
    SELECT owner_id, target
    FROM quota_bands
    WHERE period IS NULL OR period = $period
),
q AS (
    SELECT p.owner_id,
           sum(p.amount * p.win_prob) AS expected_value,
           total_quantiles(p.amount, p.win_prob, [0.1, 0.5, 0.9]) AS pq,
           any_value(b.target) AS target
    FROM pipeline AS p
    LEFT JOIN quota AS b USING (owner_id)
    GROUP BY p.owner_id
)
SELECT owner_id, target,
       round(expected_value) AS expected_value,
       round(pq[1]) AS p10, round(pq[2]) AS p50, round(pq[3]) AS p90,
       round(pq[1] - target) AS p10_gap, round(pq[2] - target) AS p50_gap,
       round(pq[3] - target) AS p90_gap
FROM q
ORDER BY owner_id;
