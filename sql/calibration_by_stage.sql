-- Calibration maps from the closed deals per owner and stage (the stage's map unless the owner has enough history), with Brier scores.
-- A map (isotonic, stated win probability -> observed win rate) is fitted per stage, and per owner and stage;
-- an owner uses their own at a stage only with at least $min_deals closed deals there.
-- $min_deals (integer): closed deals an owner needs at a stage for a map of their own; others use the stage's map (default: 60)
-- reads: closed_deals(owner_id, stage_at_snapshot, stated_prob number, won)
-- brier_calibrated is measured on the deals the map was fitted on, so it flatters the map; fit on one period and score another to judge it.
WITH usable AS (
    SELECT owner_id, stage_at_snapshot AS stage, stated_prob, won
    FROM closed_deals
    WHERE stated_prob IS NOT NULL AND won IS NOT NULL
),
stage_maps AS (
    SELECT stage, calibration_map(stated_prob, won) AS map,
           list_avg(list(stated_prob ORDER BY stated_prob)) AS stage_mean
    FROM usable
    GROUP BY stage
),
owner_maps AS (
    SELECT owner_id, stage, count(*) AS deals, calibration_map(stated_prob, won) AS map
    FROM usable
    GROUP BY owner_id, stage
),
chosen AS (
    SELECT o.owner_id, o.stage, s.stage_mean, o.deals,
           CASE WHEN o.deals >= $min_deals::INTEGER THEN 'owner' ELSE 'stage' END AS map_from,
           CASE WHEN o.deals >= $min_deals::INTEGER THEN o.map ELSE s.map END AS map
    FROM owner_maps AS o
    JOIN stage_maps AS s USING (stage)
),
scored AS (
    SELECT u.owner_id, u.stage,
           -- means over sorted lists: the same bits whatever the thread count (avg() adds
           -- in the order the threads finish)
           list_avg(list(u.stated_prob ORDER BY u.stated_prob)) AS stated_mean,
           avg(u.won::DOUBLE) AS observed_rate,
           brier_score(u.stated_prob, u.won) AS brier_stated,
           brier_score(apply_calibration(c.map, u.stated_prob), u.won) AS brier_calibrated
    FROM usable AS u
    JOIN chosen AS c USING (owner_id, stage)
    GROUP BY u.owner_id, u.stage
)
SELECT c.owner_id, c.stage, c.map_from, c.deals,
       s.stated_mean, s.observed_rate, s.brier_stated, s.brier_calibrated,
       c.map
FROM chosen AS c
JOIN scored AS s USING (owner_id, stage)
ORDER BY c.owner_id, c.stage_mean;
