-- How each owner's odds of reaching target build up through the quarter, deal by deal in expected close order.
-- $period: quota period to read from quota_bands (default: 2027-Q1)
-- Tables: pipeline, quota_bands. A window form of reach_odds: each row counts the deals expected to close by then.
SELECT p.owner_id, p.expected_close, p.deal_id, p.amount, p.win_prob,
       q.target,
       reach_odds(p.amount, p.win_prob, q.target)
           OVER (PARTITION BY p.owner_id ORDER BY p.expected_close, p.deal_id) AS p_target_by_then
FROM pipeline AS p
JOIN quota_bands AS q ON q.owner_id = p.owner_id AND q.period = $period
ORDER BY p.owner_id, p.expected_close, p.deal_id;
