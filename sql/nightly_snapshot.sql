-- A dated snapshot of every owner's band odds and outcome, for a nightly job writing into a history table.
-- $as_of: the snapshot date, e.g. 2026-11-30 (use the same value with --replace-rows as_of=...)
-- $period: quota period to read from quota_bands (default: 2027-Q1)
-- Tables: pipeline, quota_bands, owners. Typical use:
--   sqlrisk run nightly_snapshot --db forecast.duckdb -p as_of=2026-11-30 --into band_history --replace-rows as_of=2026-11-30
SELECT $as_of::DATE AS as_of,
       p.owner_id,
       any_value(w.region) AS region,
       count(*) AS deals,
       sum(p.amount * p.win_prob) AS expected_value,
       any_value(q.floor) AS floor,
       any_value(q.target) AS target,
       any_value(q.stretch) AS stretch,
       band_odds(p.amount, p.win_prob, [q.floor, q.target, q.stretch]) AS bands,
       outcome_dist(p.amount, p.win_prob) AS outcome
FROM pipeline AS p
JOIN quota_bands AS q ON q.owner_id = p.owner_id AND q.period = $period
JOIN owners AS w ON w.owner_id = p.owner_id
GROUP BY p.owner_id
ORDER BY p.owner_id;
