-- Each owner's odds of finishing below floor, floor to target, target to stretch, and at or above stretch.
-- reads: pipeline(owner_id, amount number, win_prob number; deal_id)
-- reads: quota_bands(owner_id, target number; floor number, stretch number, period)
-- reads: ; owners(owner_id; owner_name, region)
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- Bands come from whichever of floor, target and stretch an owner has: a band whose cut is
-- missing is NULL, and reach_target is the chance of reaching target. An owner with deals but
-- no quota row is listed with NULL cuts. odds_error is the band odds' accuracy in probability
-- (0: exact; 0.0007: within +/-0.07 percentage points).
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
           odds_error(p.amount, p.win_prob) AS odds_error
    FROM pipeline AS p
    LEFT JOIN quota AS q USING (owner_id)
    GROUP BY p.owner_id
)
SELECT o.owner_id, w.owner_name, w.region, o.deals,
       round(o.expected_value) AS expected_value,
       q.floor, q.target, q.stretch,
       CASE WHEN q.floor IS NOT NULL THEN o.bands[1] END AS below_floor,
       CASE WHEN q.floor IS NOT NULL AND q.target IS NOT NULL THEN o.bands[2] END AS floor_to_target,
       CASE WHEN q.target IS NOT NULL AND q.stretch IS NOT NULL THEN o.bands[-2] END AS target_to_stretch,
       CASE WHEN q.stretch IS NOT NULL THEN o.bands[-1] END AS stretch_or_more,
       CASE WHEN q.target IS NOT NULL
            THEN list_sum(o.bands[list_position(q.cuts, q.target) + 1:]) END AS reach_target,
       o.odds_error
FROM odds AS o
LEFT JOIN quota AS q USING (owner_id)
LEFT JOIN (SELECT owner_id, any_value(owner_name) AS owner_name, any_value(region) AS region FROM owners GROUP BY owner_id) AS w USING (owner_id)
ORDER BY w.region, o.owner_id;
