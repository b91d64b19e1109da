-- Each owner's quota-band odds with stated win probabilities and with probabilities calibrated on closed deals, side by side.
-- Calibration: one isotonic map per stage from closed_deals, read at each open deal's win_prob (apply_calibration).
-- $period: quota period to read from quota_bands (default: 2027-Q1)
-- Tables: pipeline (open deals), closed_deals (history for the maps; pipeline.stage is matched to
-- closed_deals.stage_at_snapshot), quota_bands (cuts per owner and period), owners.
-- A deal whose stage has no closed deals keeps its stated probability; uncalibrated_deals counts them.
WITH maps AS (
    SELECT stage_at_snapshot AS stage, calibration_map(stated_prob, won) AS map
    FROM closed_deals
    GROUP BY stage_at_snapshot
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
           band_odds(d.amount, d.win_prob, [q.floor, q.target, q.stretch]) AS stated,
           band_odds(d.amount, d.calibrated_prob, [q.floor, q.target, q.stretch]) AS calibrated
    FROM deals AS d
    JOIN quota_bands AS q ON q.owner_id = d.owner_id AND q.period = $period
    GROUP BY d.owner_id
)
SELECT o.owner_id, w.owner_name, w.region, o.deals, o.uncalibrated_deals,
       q.floor, q.target, q.stretch,
       round(o.expected_stated) AS expected_stated,
       round(o.expected_calibrated) AS expected_calibrated,
       o.stated[1] AS below_floor_stated, o.calibrated[1] AS below_floor_calibrated,
       o.stated[2] AS floor_to_target_stated, o.calibrated[2] AS floor_to_target_calibrated,
       o.stated[3] AS target_to_stretch_stated, o.calibrated[3] AS target_to_stretch_calibrated,
       o.stated[4] AS stretch_or_more_stated, o.calibrated[4] AS stretch_or_more_calibrated
FROM odds AS o
JOIN quota_bands AS q ON q.owner_id = o.owner_id AND q.period = $period
JOIN owners AS w ON w.owner_id = o.owner_id
ORDER BY w.region, o.owner_id;
