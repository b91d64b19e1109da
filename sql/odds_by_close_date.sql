-- How each owner's odds of reaching target build up through the quarter, deal by deal in expected close order.
-- reads: pipeline(owner_id, amount number, win_prob number, expected_close date; deal_id)
-- reads: quota_bands(owner_id, target number; period)
-- $period: quota period to read from quota_bands; rows with no period apply to every period (default: 2027-Q1)
-- A window form of reach_odds: each row counts the deals expected to close by then.
-- Owners without a target are left out.
SELECT p.owner_id, p.expected_close, p.deal_id, p.amount, p.win_prob,
       q.target,
       reach_odds(p.amount, p.win_prob, q.target)
           OVER (PARTITION BY p.owner_id ORDER BY p.expected_close, p.deal_id) AS p_target_by_then
FROM pipeline AS p
JOIN quota_bands AS q ON q.owner_id = p.owner_id AND (q.period IS NULL OR q.period = $period)
WHERE q.target IS NOT NULL
ORDER BY p.owner_id, p.expected_close, p.deal_id;
