-- Were the odds right? Each past quarter's forecast from its first day, per owner, scored against what was won, and the scores of each forecast method.
-- reads: past_deals(period, period_start date, owner_id, amount number, win_prob number, result; stage, region, deal_id)
-- reads: past_quotas(owner_id, period, target number; floor number, stretch number)
-- reads: closed_deals(stage_at_snapshot, stated_prob number, won, closed_on date)
-- $rho (number): correlation of the two correlated methods, in [0, 1) (default: 0.15)
-- $show (text): summary (one row per method) or forecasts (every quarter and owner per method, then the summary rows) (default: summary)
-- past_deals holds, per period, the deals open on its first day (period_start) that were
-- expected to close in it, with the probability stated then and what each did by the period's
-- end: result 'won' counts into the actual total; 'lost', 'slipped' or anything else does not.
-- Methods: the stated probabilities; probabilities calibrated per stage (apply_calibration)
-- with maps fitted ONLY on closed_deals with closed_on before that period's period_start (no
-- look-ahead: later closes cannot move a period's forecast; a period with no earlier closed
-- deal at a stage keeps the stated probability there, counted in uncalibrated_deals); and both
-- with deals correlated at $rho (outcome_dist(..., correlation := $rho)).
-- Scores per forecast: pit = outcome_pit, crps = outcome_crps (currency, lower is better),
-- band_rps = band_rps of the quota bands given band_of(actual), reach_brier = (P(reach target)
-- - reached)^2, coverage_80 = 1 when actual is inside outcome_interval(o, 0.8). Summary rows
-- (period and owner_id 'all') give their means over the method's forecasts (coverage_80: the
-- share of actuals inside, 0.8 expected), expected and actual as means per forecast, and the
-- PIT histogram: pit_counts[b] forecasts with pit in [(b-1)/10, b/10), pit_expected = forecasts
-- / 10 of them if the forecasts are right. Chart: sqlrisk chart backtest --output backtest.svg
WITH checked AS (
    SELECT CASE WHEN $show IN ('summary', 'forecasts') THEN $show
                ELSE error('backtest: show ' || $show || ' is not summary or forecasts; give '
                           || '-p show=summary or -p show=forecasts') END AS shown,
           CASE WHEN $rho >= 0 AND $rho < 1 THEN $rho
                ELSE error('backtest: rho ' || $rho || ' is outside [0, 1); 0.05 to 0.3 is '
                           || 'typical') END AS rho
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
    SELECT d.period, d.owner_id, d.region, d.amount, d.win_prob AS stated,
           coalesce(apply_calibration(m.map, d.win_prob), d.win_prob) AS calibrated,
           m.map IS NULL AND d.win_prob IS NOT NULL AS uncalibrated,
           CASE WHEN lower(trim(d.result)) = 'won' THEN d.amount ELSE 0 END AS won_amount
    FROM past_deals AS d
    LEFT JOIN maps AS m ON m.period = d.period AND m.stage = d.stage
),
methods AS (
    SELECT * FROM (VALUES (1, 'stated', false, 0.0), (2, 'calibrated', true, 0.0))
                  AS m(k, method, calibrated, rho)
    UNION ALL
    SELECT k + 2, method || ', rho ' || c.rho, calibrated, c.rho
    FROM (VALUES (1, 'stated', false), (2, 'calibrated', true)) AS m(k, method, calibrated),
         checked AS c
    WHERE c.rho > 0
),
forecasts AS MATERIALIZED (
    SELECT m.k, m.method, d.period, d.owner_id, any_value(d.region) AS region,
           count(d.amount * d.stated) AS deals,
           count(*) FILTER (WHERE m.calibrated AND d.uncalibrated) AS uncalibrated_deals,
           list_sum(list(d.won_amount ORDER BY d.won_amount)) AS actual,
           outcome_dist(d.amount, CASE WHEN m.calibrated THEN d.calibrated ELSE d.stated END,
                        correlation := m.rho) AS o
    FROM deals AS d
    CROSS JOIN methods AS m
    GROUP BY m.k, m.method, m.calibrated, m.rho, d.period, d.owner_id
),
scored AS (
    SELECT f.*, q.floor, q.target, q.stretch, c.cuts,
           outcome_bands(f.o, c.cuts) AS bands,
           band_of(f.actual, c.cuts) AS band_landed,
           outcome_quantiles(f.o, [0.1, 0.5, 0.9]) AS qs,
           outcome_interval(f.o, level := 0.8) AS i80
    FROM forecasts AS f
    LEFT JOIN past_quotas AS q ON q.owner_id = f.owner_id AND q.period = f.period
    CROSS JOIN LATERAL (SELECT coalesce(list_filter([q.floor, q.target, q.stretch],
                                                    lambda x: x IS NOT NULL), [])::DOUBLE[]
                        AS cuts) AS c
    WHERE f.o IS NOT NULL
),
per_forecast AS MATERIALIZED (
    SELECT k, method, period, owner_id, region, deals, uncalibrated_deals, floor, target, stretch,
           CASE WHEN floor IS NOT NULL THEN bands[1] END AS below_floor,
           CASE WHEN floor IS NOT NULL AND target IS NOT NULL THEN bands[2] END
               AS floor_to_target,
           CASE WHEN target IS NOT NULL AND stretch IS NOT NULL THEN bands[-2] END
               AS target_to_stretch,
           CASE WHEN stretch IS NOT NULL THEN bands[-1] END AS stretch_or_more,
           outcome_mean(o) AS expected, qs[1] AS p10, qs[2] AS p50, qs[3] AS p90,
           actual, band_landed,
           outcome_pit(o, actual) AS pit,
           outcome_crps(o, actual) AS crps,
           CASE WHEN len(cuts) > 0 THEN band_rps(bands, band_landed) END AS band_rps,
           CASE WHEN target IS NOT NULL THEN
               (outcome_reach(o, target) - (band_of(actual, [target]) = 2)::DOUBLE) ^ 2
           END AS reach_brier,
           (actual BETWEEN i80.lo AND i80.hi)::DOUBLE AS coverage_80,
           1 AS forecasts
    FROM scored
),
summary AS (
    SELECT k, method, 'all' AS period, 'all' AS owner_id, sum(deals)::BIGINT AS deals,
           sum(uncalibrated_deals)::BIGINT AS uncalibrated_deals,
           -- means over lists in a fixed order: the same data gives the same bits on any
           -- number of threads (avg() adds in the order the threads finish)
           list_avg(list(expected ORDER BY period, owner_id)) AS expected,
           list_avg(list(actual ORDER BY period, owner_id)) AS actual,
           list_avg(list(pit ORDER BY period, owner_id)) AS pit,
           list_avg(list(crps ORDER BY period, owner_id)) AS crps,
           list_avg(list(band_rps ORDER BY period, owner_id)) AS band_rps,
           list_avg(list(reach_brier ORDER BY period, owner_id)) AS reach_brier,
           list_avg(list(coverage_80 ORDER BY period, owner_id)) AS coverage_80,
           count(*) AS forecasts,
           histogram(least(floor(pit * 10), 9)::INTEGER + 1) AS pit_map
    FROM per_forecast
    GROUP BY k, method
)
SELECT method, period, owner_id, region, deals, uncalibrated_deals, floor, target, stretch,
       below_floor, floor_to_target, target_to_stretch, stretch_or_more,
       round(expected) AS expected, round(p10) AS p10, round(p50) AS p50, round(p90) AS p90,
       round(actual) AS actual, band_landed, pit, crps, band_rps, reach_brier, coverage_80,
       forecasts, pit_counts, pit_expected
FROM (
    SELECT *, NULL::BIGINT[] AS pit_counts, NULL::DOUBLE AS pit_expected, false AS is_summary
    FROM per_forecast
    WHERE (SELECT shown FROM checked) = 'forecasts'
    UNION ALL BY NAME
    SELECT *, list_transform(range(1, 11), lambda b: coalesce(pit_map[b], 0))::BIGINT[]
               AS pit_counts,
           forecasts / 10 AS pit_expected, true AS is_summary
    FROM summary
    WHERE (SELECT shown FROM checked) IS NOT NULL
)
ORDER BY is_summary, period, owner_id, k;
