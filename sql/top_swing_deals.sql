-- For each owner, the open deals whose outcome moves the chance of reaching the owner's next band cut the most.
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- $top (integer): how many deals to list per owner (default: 5)
-- The next cut is the first of floor, target and stretch (those present) above the owner's
-- expected value (the last one when the expected value is already past it). reach_now = P(total >= cut) today;
-- reach_if_won / reach_if_lost are the same chance with the deal won / lost; swing is their gap.
-- reads: pipeline(owner_id, deal_id, amount number, win_prob number; stage)
-- reads: quota_bands(owner_id, target number; floor number, stretch number, period)
-- reads: ; owners(owner_id; owner_name, region)
WITH ev AS (
    SELECT owner_id, sum(amount * win_prob) AS expected_value
    FROM pipeline GROUP BY owner_id
),
present AS (
    SELECT q.owner_id, e.expected_value,
           list_filter([{'name': 'floor', 'cut': q.floor::DOUBLE},
                        {'name': 'target', 'cut': q.target::DOUBLE},
                        {'name': 'stretch', 'cut': q.stretch::DOUBLE}],
                       lambda c: c.cut IS NOT NULL) AS cuts
    FROM quota_bands AS q JOIN ev AS e USING (owner_id)
    WHERE q.period IS NULL OR q.period = $period
),
next_cut AS (
    SELECT owner_id, expected_value, chosen.name AS cut_name, chosen.cut AS cut
    FROM (SELECT owner_id, expected_value,
                 coalesce(list_filter(cuts, lambda c: c.cut > expected_value)[1],
                          cuts[-1]) AS chosen
          FROM present)
    WHERE chosen IS NOT NULL
),
swings AS (
    SELECT p.owner_id,
           reach_odds(p.amount, p.win_prob, n.cut) AS reach_now,
           deal_swing(p.deal_id, p.amount, p.win_prob, n.cut) AS deals
    FROM pipeline AS p JOIN next_cut AS n USING (owner_id)
    GROUP BY p.owner_id
),
ranked AS (
    SELECT s.owner_id, s.reach_now, d.deal_id, d.reach_if_won, d.reach_if_lost, d.swing,
           row_number() OVER (PARTITION BY s.owner_id ORDER BY d.swing DESC, d.deal_id) AS rank
    FROM swings AS s, unnest(s.deals) AS u(d)
)
SELECT r.owner_id, w.owner_name, n.cut_name, n.cut, round(n.expected_value) AS expected_value,
       r.reach_now, r.rank, r.deal_id, p.stage, p.amount, p.win_prob,
       r.reach_if_won, r.reach_if_lost, r.swing
FROM ranked AS r
JOIN next_cut AS n USING (owner_id)
LEFT JOIN (SELECT owner_id, any_value(owner_name) AS owner_name, any_value(region) AS region FROM owners GROUP BY owner_id) AS w USING (owner_id)
JOIN pipeline AS p ON p.deal_id = r.deal_id
WHERE r.rank <= CAST($top AS INTEGER)
ORDER BY w.region, r.owner_id, r.rank;
