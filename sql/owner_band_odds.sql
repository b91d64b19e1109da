-- Each owner's odds of finishing below floor, floor to target, target to stretch, and at or above stretch.
-- $period: quota period to read from quota_bands (default: 2027-Q1)
-- Tables: pipeline (open deals), quota_bands (cuts per owner and period), owners.
WITH odds AS (
    SELECT p.owner_id,
           count(*) AS deals,
           sum(p.amount * p.win_prob) AS expected_value,
           band_odds(p.amount, p.win_prob, [q.floor, q.target, q.stretch]) AS bands,
           outcome_dist(p.amount, p.win_prob).rounding AS rounding
    FROM pipeline AS p
    JOIN quota_bands AS q ON q.owner_id = p.owner_id AND q.period = $period
    GROUP BY p.owner_id
)
SELECT o.owner_id, w.owner_name, w.region, o.deals,
       round(o.expected_value) AS expected_value,
       q.floor, q.target, q.stretch,
       o.bands[1] AS below_floor,
       o.bands[2] AS floor_to_target,
       o.bands[3] AS target_to_stretch,
       o.bands[4] AS stretch_or_more,
       round(o.rounding) AS rounding
FROM odds AS o
JOIN quota_bands AS q ON q.owner_id = o.owner_id AND q.period = $period
JOIN owners AS w ON w.owner_id = o.owner_id
ORDER BY w.region, o.owner_id;
