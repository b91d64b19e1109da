-- Region and company totals rolled up from per-owner outcomes with outcome_merge: mean, spread and P10/P50/P90.
-- reads: pipeline(owner_id, region, amount number, win_prob number; deal_id)
-- Each owner's outcome is computed once, then merged; deals are not touched again.
WITH owner_outcomes AS (
    SELECT owner_id, region, outcome_dist(amount, win_prob) AS outcome
    FROM pipeline
    GROUP BY owner_id, region
),
rolled AS (
    SELECT CASE WHEN grouping(region) = 1 THEN '(company)'
                ELSE coalesce(region, '(no region)') END AS region,
           count(*) AS owners,
           outcome_merge(outcome) AS outcome
    FROM owner_outcomes
    GROUP BY ROLLUP (region)
)
SELECT region, owners,
       round(outcome_mean(outcome)) AS expected_value,
       round(outcome_sd(outcome)) AS sd,
       round(outcome_quantiles(outcome, [0.1, 0.5, 0.9])[1]) AS p10,
       round(outcome_quantiles(outcome, [0.1, 0.5, 0.9])[2]) AS p50,
       round(outcome_quantiles(outcome, [0.1, 0.5, 0.9])[3]) AS p90,
       outcome_error(outcome) AS odds_error
FROM rolled
ORDER BY region = '(company)', region = '(no region)', region;
