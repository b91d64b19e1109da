-- A dated snapshot of every owner's band odds and outcome, for a nightly job writing into a history table.
-- reads: pipeline(owner_id, amount number, win_prob number; deal_id)
-- reads: quota_bands(owner_id, target number; floor number, stretch number, period)
-- reads: ; owners(owner_id; region)
-- $as_of (date): the snapshot date, e.g. 2026-11-30 (use the same value with --replace-rows as_of=...)
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- bands holds one probability per band of the owner's cuts (those of floor, target and
-- stretch that are present, in that order); an owner without a quota row gets bands [1.0].
-- odds_error is the bands' accuracy in probability (0 when exact).
-- Typical use:
--   sqlrisk run nightly_snapshot --db forecast.duckdb -p as_of=2026-11-30 --into band_history --replace-rows as_of=2026-11-30
WITH quota AS (
    SELECT owner_id, floor, target, stretch,
           list_filter([floor, target, stretch], lambda c: c IS NOT NULL)::DOUBLE[] AS cuts
    FROM quota_bands
    WHERE period IS NULL OR period = $period
),
odds AS (
    SELECT p.owner_id,
           count(*) FILTER (WHERE p.amount IS NOT NULL AND p.win_prob IS NOT NULL) AS deals,
           sum(p.amount * p.win_prob) AS expected_value,
           band_odds(p.amount, p.win_prob, coalesce(q.cuts, [])) AS bands,
           odds_error(p.amount, p.win_prob) AS odds_error,
           outcome_dist(p.amount, p.win_prob) AS outcome
    FROM pipeline AS p
    LEFT JOIN quota AS q USING (owner_id)
    GROUP BY p.owner_id
)
SELECT $as_of::DATE AS as_of,
       o.owner_id,
       w.region,
       o.deals,
       o.expected_value,
       q.floor, q.target, q.stretch,
       o.bands,
       o.odds_error,
       o.outcome
FROM odds AS o
LEFT JOIN quota AS q USING (owner_id)
LEFT JOIN (SELECT owner_id, any_value(region) AS region FROM owners GROUP BY owner_id) AS w USING (owner_id)
ORDER BY o.owner_id;
