-- Each region's outcome with its summed quota bands as cuts: the input for 'sqlrisk chart'.
-- $period: quota period to read from quota_bands (default: 2027-Q1)
-- Tables: pipeline, quota_bands, owners.
WITH bands AS (
    SELECT w.region, [sum(q.floor), sum(q.target), sum(q.stretch)]::DOUBLE[] AS cuts
    FROM quota_bands AS q
    JOIN owners AS w USING (owner_id)
    WHERE q.period = $period
    GROUP BY w.region
)
SELECT p.region, any_value(b.cuts) AS cuts, outcome_dist(p.amount, p.win_prob) AS outcome
FROM pipeline AS p
JOIN bands AS b USING (region)
GROUP BY p.region
ORDER BY p.region;
