-- Region and company odds rolled up from the owner outcomes stored by nightly_snapshot, without touching the deals.
-- $as_of: which snapshot to roll up, e.g. 2026-11-30
-- Tables: band_history (written by: sqlrisk run nightly_snapshot ... --into band_history).
WITH rolled AS (
    SELECT coalesce(region, '(company)') AS region,
           count(*) AS owners,
           sum(floor) AS floor, sum(target) AS target, sum(stretch) AS stretch,
           outcome_merge(outcome) AS outcome
    FROM band_history
    WHERE as_of = $as_of::DATE
    GROUP BY ROLLUP (region)
)
SELECT region, owners,
       round(outcome_mean(outcome)) AS expected_value,
       floor, target, stretch,
       outcome_bands(outcome, [floor, target, stretch]) AS bands,
       outcome_quantiles(outcome, [0.1, 0.5, 0.9]) AS p10_p50_p90,
       round(outcome.rounding) AS rounding
FROM rolled
ORDER BY region = '(company)', region;
