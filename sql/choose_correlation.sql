-- Which correlation fits the past? Mean CRPS and 80% interval coverage of the past quarters' forecasts for rho from 0 to 0.3, per region and overall, and the rho with the lowest CRPS.
-- reads: past_deals(period, period_start date, owner_id, amount number, win_prob number, result; stage, region, deal_id)
-- reads: closed_deals(stage_at_snapshot, stated_prob number, won, closed_on date)
-- $probs (text): stated or calibrated: the probabilities the forecasts use (default: calibrated)
-- Each period's forecast per owner is outcome_dist(amount, prob, correlation := rho) on the
-- deals open on its first day (past_deals, as sql/backtest.sql reads them), for rho in 0,
-- 0.05, 0.1, 0.15, 0.2, 0.3; calibrated probabilities come from maps fitted only on
-- closed_deals closed before the period's start (no look-ahead). crps is the mean
-- outcome_crps of the actual won totals (currency, lower is better), coverage_80 the share of
-- actuals inside outcome_interval(o, 0.8) (0.8 expected), pit the mean PIT (0.5 expected).
-- best_rho is the scope's rho with the lowest crps; a scope is a region or 'all regions'.
-- With a few periods the choice is rough: prefer the overall rho unless a region has many
-- owners and differs clearly, and re-run it each quarter.
WITH checked AS (
    SELECT CASE WHEN $probs IN ('stated', 'calibrated') THEN $probs
                ELSE error('choose_correlation: probs ' || $probs || ' is not stated or '
                           || 'calibrated; give -p probs=stated or -p probs=calibrated') END
               AS probs
),
periods AS (
    SELECT period, min(period_start) AS period_start FROM past_deals GROUP BY period
),
maps AS (
    SELECT p.period, c.stage_at_snapshot AS stage, calibration_map(c.stated_prob, c.won) AS map
    FROM periods AS p
    JOIN closed_deals AS c ON c.closed_on < p.period_start
    GROUP BY p.period, c.stage_at_snapshot
),
deals AS (
    SELECT d.period, d.owner_id, coalesce(d.region, '(no region)') AS region, d.amount,
           CASE WHEN (SELECT probs FROM checked) = 'calibrated'
                THEN coalesce(apply_calibration(m.map, d.win_prob), d.win_prob)
                ELSE d.win_prob END AS prob,
           CASE WHEN lower(trim(d.result)) = 'won' THEN d.amount ELSE 0 END AS won_amount
    FROM past_deals AS d
    LEFT JOIN maps AS m ON m.period = d.period AND m.stage = d.stage
),
grid AS (
    SELECT unnest([0.0, 0.05, 0.1, 0.15, 0.2, 0.3]::DOUBLE[]) AS rho
),
forecasts AS MATERIALIZED (
    SELECT g.rho, d.period, d.owner_id, any_value(d.region) AS region,
           list_sum(list(d.won_amount ORDER BY d.won_amount)) AS actual,
           outcome_dist(d.amount, d.prob, correlation := g.rho) AS o
    FROM deals AS d
    CROSS JOIN grid AS g
    GROUP BY g.rho, d.period, d.owner_id
),
scores AS (
    SELECT rho, region, period, owner_id, outcome_crps(o, actual) AS crps,
           outcome_pit(o, actual) AS pit,
           (actual BETWEEN outcome_interval(o).lo AND outcome_interval(o).hi)::DOUBLE AS inside
    FROM forecasts
    WHERE o IS NOT NULL
),
by_scope AS (
    SELECT coalesce(region, 'all regions') AS scope, grouping(region) AS overall, rho,
           count(*) AS forecasts,
           -- means in a fixed order, so the same data gives the same bits on any thread count
           list_avg(list(crps ORDER BY period, owner_id)) AS crps,
           list_avg(list(inside ORDER BY period, owner_id)) AS coverage_80,
           list_avg(list(pit ORDER BY period, owner_id)) AS pit
    FROM scores
    GROUP BY GROUPING SETS ((rho, region), (rho))
)
SELECT scope, rho, forecasts, crps, coverage_80, pit,
       arg_min(rho, crps) OVER (PARTITION BY scope) AS best_rho,
       crps = min(crps) OVER (PARTITION BY scope) AS lowest
FROM by_scope
ORDER BY overall DESC, scope, rho;
