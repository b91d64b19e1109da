-- Region and company odds rolled up from the owner outcomes stored by nightly_snapshot, without touching the deals.
-- reads: band_history(as_of date, region, floor number, target number, stretch number, outcome)
-- $as_of (date): which snapshot to roll up, e.g. 2026-11-30
-- band_history is written by: sqlrisk run nightly_snapshot ... --into band_history. A region's
-- cut is the sum of its owners' cuts, present only when each owner has it; bands has one
-- probability per band of the cuts present.
WITH rolled AS (
    SELECT CASE WHEN grouping(region) = 1 THEN '(company)'
                ELSE coalesce(region, '(no region)') END AS region,
           count(*) AS owners,
           CASE WHEN count(floor) = count(*) THEN sum(floor) END AS floor,
           CASE WHEN count(target) = count(*) THEN sum(target) END AS target,
           CASE WHEN count(stretch) = count(*) THEN sum(stretch) END AS stretch,
           outcome_merge(outcome) AS outcome
    FROM band_history
    WHERE as_of = $as_of
    GROUP BY ROLLUP (region)
)
SELECT region, owners,
       round(outcome_mean(outcome)) AS expected_value,
       floor, target, stretch,
       outcome_bands(outcome, coalesce(list_filter([floor, target, stretch],
                                                   lambda c: c IS NOT NULL), [])::DOUBLE[]) AS bands,
       outcome_quantiles(outcome, [0.1, 0.5, 0.9]) AS p10_p50_p90,
       outcome_error(outcome) AS odds_error
FROM rolled
ORDER BY region = '(company)', region = '(no region)', region;
