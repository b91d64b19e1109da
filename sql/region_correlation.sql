-- For each region, the odds of landing below, inside and above its summed quota bands with deals independent and with correlated deals, side by side.
-- $rho: correlation between the deals of one region, in [0, 1) (default: 0.15)
-- $period: quota period to read from quota_bands (default: 2027-Q1)
-- Tables: pipeline, quota_bands, owners. The correlated odds are exact (one-factor Gaussian copula).
WITH bands AS (
    SELECT w.region,
           sum(q.floor) AS floor, sum(q.target) AS target, sum(q.stretch) AS stretch
    FROM quota_bands AS q
    JOIN owners AS w USING (owner_id)
    WHERE q.period = $period
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
       outcome_bands(o.independent, [b.floor, b.target, b.stretch]) AS independent_bands,
       outcome_bands(o.correlated, [b.floor, b.target, b.stretch]) AS correlated_bands,
       round(outcome_sd(o.independent)) AS independent_sd,
       round(outcome_sd(o.correlated)) AS correlated_sd
FROM odds AS o
JOIN bands AS b USING (region)
ORDER BY o.region;
