-- Each owner's quota-band odds with stated win probabilities and with probabilities calibrated on closed deals, side by side.
-- reads: pipeline(owner_id, amount number, win_prob number; stage, deal_id)
-- reads: closed_deals(stage_at_snapshot, stated_prob number, won)
-- reads: quota_bands(owner_id, target number; floor number, stretch number, period)
-- reads: ; owners(owner_id; owner_name, region)
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- Calibration: one isotonic map per stage from closed_deals, read at each open deal's win_prob
-- (apply_calibration); pipeline.stage is matched to closed_deals.stage_at_snapshot. A deal whose
-- stage has no closed deals keeps its stated probability; uncalibrated_deals counts them.
-- A band whose cut is missing is NULL; an owner with deals but no quota row has NULL cuts.
WITH maps AS (
    SELECT stage_at_snapshot AS stage, calibration_map(stated_prob, won) AS map
    FROM closed_deals
    GROUP BY stage_at_snapshot
),
quota AS (
    SELECT owner_id, floor, target, stretch,
           list_filter([floor, target, stretch], lambda c: c IS NOT NULL)::DOUBLE[] AS cuts
    FROM quota_bands
    WHERE period IS NULL OR period = $period
),
deals AS (
    SELECT p.owner_id, p.amount, p.win_prob,
           coalesce(apply_calibration(m.map, p.win_prob), p.win_prob) AS calibrated_prob,
           m.map IS NULL AND p.win_prob IS NOT NULL AS uncalibrated
    FROM pipeline AS p
    LEFT JOIN maps AS m ON m.stage = p.stage
),
odds AS (
    SELECT d.owner_id,
           count(*) AS deals,
           count(*) FILTER (WHERE d.uncalibrated) AS uncalibrated_deals,
           sum(d.amount * d.win_prob) AS expected_stated,
           sum(d.amount * d.calibrated_prob) AS expected_calibrated,
           band_odds(d.amount, d.win_prob, coalesce(q.cuts, [])) AS stated,
           band_odds(d.amount, d.calibrated_prob, coalesce(q.cuts, [])) AS calibrated
    FROM deals AS d
    LEFT JOIN quota AS q USING (owner_id)
    GROUP BY d.owner_id
)
SELECT o.owner_id, w.owner_name, w.region, o.deals, o.uncalibrated_deals,
       q.floor, q.target, q.stretch,
       round(o.expected_stated) AS expected_stated,
       round(o.expected_calibrated) AS expected_calibrated,
       CASE WHEN q.floor IS NOT NULL THEN o.stated[1] END AS below_floor_stated,
       CASE WHEN q.floor IS NOT NULL THEN o.calibrated[1] END AS below_floor_calibrated,
       CASE WHEN q.floor IS NOT NULL AND q.target IS NOT NULL THEN o.stated[2] END
           AS floor_to_target_stated,
       CASE WHEN q.floor IS NOT NULL AND q.target IS NOT NULL THEN o.calibrated[2] END
           AS floor_to_target_calibrated,
       CASE WHEN q.target IS NOT NULL AND q.stretch IS NOT NULL THEN o.stated[-2] END
           AS target_to_stretch_stated,
       CASE WHEN q.target IS NOT NULL AND q.stretch IS NOT NULL THEN o.calibrated[-2] END
           AS target_to_stretch_calibrated,
       CASE WHEN q.stretch IS NOT NULL THEN o.stated[-1] END AS stretch_or_more_stated,
       CASE WHEN q.stretch IS NOT NULL THEN o.calibrated[-1] END AS stretch_or_more_calibrated
FROM odds AS o
LEFT JOIN quota AS q USING (owner_id)
LEFT JOIN (SELECT owner_id, any_value(owner_name) AS owner_name, any_value(region) AS region FROM owners GROUP BY owner_id) AS w USING (owner_id)
ORDER BY w.region, o.owner_id;
