-- How each owner's band odds moved from one nightly snapshot to the next, read from the history nightly_snapshot writes.
-- reads: band_history(as_of date, owner_id, floor number, target number, stretch number, bands; region, deals integer, expected_value number, odds_error number)
-- $owner (text): one owner_id, or all for every owner (default: all)
-- $from (date): the first snapshot date to show (default: 1900-01-01)
-- $to (date): the last snapshot date to show (default: 9999-12-31)
-- band_history is written by: sqlrisk run nightly_snapshot ... --into band_history. One row
-- per owner and snapshot date, ordered by owner then date. The band columns follow
-- owner_band_odds: bands holds one probability per cut present (floor, target, stretch, in
-- that order), a band whose cut is missing is NULL, and reach_target is the chance of
-- reaching target. odds_error is NULL in a band_history written before it existed.
-- Typical use:
--   sqlrisk run odds_history --db forecast.duckdb -p owner=own_032 -p from=2026-11-01
WITH history AS (
    SELECT *, list_filter([floor, target, stretch], lambda c: c IS NOT NULL)::DOUBLE[] AS cuts
    FROM band_history
    WHERE ($owner = 'all' OR owner_id = $owner)
      AND as_of BETWEEN $from AND $to
)
SELECT as_of, owner_id, region, deals, expected_value, floor, target, stretch,
       CASE WHEN floor IS NOT NULL THEN bands[1] END AS below_floor,
       CASE WHEN floor IS NOT NULL AND target IS NOT NULL THEN bands[2] END AS floor_to_target,
       CASE WHEN target IS NOT NULL AND stretch IS NOT NULL THEN bands[-2] END AS target_to_stretch,
       CASE WHEN stretch IS NOT NULL THEN bands[-1] END AS stretch_or_more,
       CASE WHEN target IS NOT NULL
            THEN list_sum(bands[list_position(cuts, target) + 1:]) END AS reach_target,
       odds_error
FROM history
ORDER BY owner_id, as_of;
