-- For each region, the odds of landing below, inside and above its summed quota bands with deals independent and with correlated deals, side by side.
-- reads: pipeline(region, amount number, win_prob number; owner_id, deal_id)
-- reads: quota_bands(owner_id, target number; floor number, stretch number, period), owners(owner_id, region)
-- $rho (number): correlation between the deals of one region, in [0, 1) (default: 0.15)
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- The correlated odds follow the one-factor Gaussian copula: exact, or for large regions
-- without a dominant deal from an Edgeworth expansion good to about 1e-5 (README
-- 'Correlated deals and simulation'). A region's cut is the sum of its owners' cuts,
-- present only when each of its quota rows has it; the bands lists have one probability
-- per band of the cuts present.
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
),
odds AS (
    SELECT p.region,
           sum(p.amount * p.win_prob) AS expected_value,
           outcome_dist(p.amount, p.win_prob) AS independent,
           outcome_dist(p.amount, p.win_prob, correlation := $rho::DOUBLE) AS correlated
    FROM pipeline AS p
    GROUP BY p.region
)
SELECT o.region,
       round(o.expected_value) AS expected_value,
       b.floor, b.target, b.stretch,
       outcome_bands(o.independent, coalesce(list_filter([b.floor, b.target, b.stretch],
                                                         lambda c: c IS NOT NULL), [])::DOUBLE[])
           AS independent_bands,
       outcome_bands(o.correlated, coalesce(list_filter([b.floor, b.target, b.stretch],
                                                        lambda c: c IS NOT NULL), [])::DOUBLE[])
           AS correlated_bands,
       round(outcome_sd(o.independent)) AS independent_sd,
       round(outcome_sd(o.correlated)) AS correlated_sd
FROM odds AS o
LEFT JOIN bands AS b USING (region)
ORDER BY o.region;
