-- How often closed deals were won by stated-probability bin, with 95% Wilson intervals: the reliability table.
-- Columns: deals, mean stated probability, observed win rate, gap, wilson_lo/hi; 'sqlrisk chart reliability_table' draws it.
-- $bins (integer): number of equal-width stated-probability bins on [0, 1]; a probability of 1 goes in the last (default: 10)
-- reads: closed_deals(stated_prob number, won)
-- Rows with a NULL stated_prob or won are left out; empty bins show 0 deals.
-- The bins are the ones brier_parts uses: bin k holds k/bins <= stated_prob < (k+1)/bins.
WITH edges AS (
    SELECT k AS bin, k / $bins::INTEGER AS lo, (k + 1) / $bins::INTEGER AS hi,
           k = $bins::INTEGER - 1 AS last
    FROM range(CASE WHEN $bins::INTEGER BETWEEN 1 AND 1000 THEN $bins::INTEGER
                    ELSE error('reliability_table: bins ' || $bins || ' is not a whole number in '
                               || '[1, 1000] (10 equal-width bins is usual)') END) AS r(k)
),
usable AS (
    SELECT CASE WHEN stated_prob BETWEEN 0 AND 1 THEN stated_prob::DOUBLE
                ELSE error('reliability_table: probability ' || stated_prob || ' is outside [0, 1] '
                           || '(were percentages given? divide by 100)') END AS prob,
           CASE WHEN won::DOUBLE IN (0, 1) THEN won::DOUBLE
                ELSE error('reliability_table: won ' || won || ' is not 0/1 or true/false') END AS won
    FROM closed_deals
    WHERE stated_prob IS NOT NULL AND won IS NOT NULL
),
binned AS (
    SELECT e.bin, e.lo, e.hi, count(u.prob) AS deals, sum(u.won) AS won_deals,
           -- a mean over a sorted list: the same bits whatever the thread count; won is 0/1,
           -- so avg(u.won) is exact in any order
           list_avg(list(u.prob ORDER BY u.prob) FILTER (WHERE u.prob IS NOT NULL)) AS stated_mean,
           avg(u.won) AS observed_rate
    FROM edges AS e
    LEFT JOIN usable AS u ON u.prob >= e.lo AND (u.prob < e.hi OR e.last)
    GROUP BY e.bin, e.lo, e.hi
)
SELECT bin + 1 AS bin, lo, hi, deals, stated_mean, observed_rate,
       observed_rate - stated_mean AS gap,
       wilson_interval(won_deals, deals).lo AS wilson_lo,  -- 95%; NULL for an empty bin
       wilson_interval(won_deals, deals).hi AS wilson_hi
FROM binned
ORDER BY bin;
