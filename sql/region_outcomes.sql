-- Each region's outcome with its summed quota bands as cuts: the input for 'sqlrisk chart'.
-- reads: pipeline(region, amount number, win_prob number; owner_id, deal_id)
-- reads: quota_bands(owner_id, target number; floor number, stretch number, period), owners(owner_id, region)
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- A region's cut is the sum of its owners' cuts, present only when each of its quota rows has it.
WITH bands AS (
    SELECT w.region,
           CASE WHEN count(q.floor) = count(*) THEN sum(q.floor) END AS floor,
           CASE WHEN count(q.target) = count(*) THEN sum(q.target) END AS target,
           CASE WHEN count(q.stretch) = count(*) THEN sum(q.stretch) END AS stretch
    FROM quota_bands AS q
    JOIN (SELECT owner_id, any_value(region) AS region FROM owners GROUP BY owner_id) AS w
        USING (owner_id)
    WHERE q.period IS NULL OR q.period = $period
    GROUP BY w.region
)
SELECT p.region,
       any_value(b.floor) AS floor, any_value(b.target) AS target, any_value(b.stretch) AS stretch,
       any_value(coalesce(list_filter([b.floor, b.target, b.stretch], lambda c: c IS NOT NULL),
                          []))::DOUBLE[] AS cuts,
       outcome_dist(p.amount, p.win_prob) AS outcome
FROM pipeline AS p
LEFT JOIN bands AS b USING (region)
GROUP BY p.region
ORDER BY p.region;
