-- Each owner's band odds and P10/P50/P90 against their quota bands.
SELECT p.owner_id, q.floor, q.target, q.stretch,
       band_odds(p.amount, p.win_prob, [q.floor, q.target, q.stretch]) AS bands,
       total_quantiles(p.amount, p.win_prob, [0.1, 0.5, 0.9]) AS p10_p50_p90,
       odds_error(p.amount, p.win_prob) AS odds_error
FROM {{ ref('stg_pipeline') }} AS p
JOIN {{ ref('stg_quotas') }} AS q USING (owner_id)
GROUP BY p.owner_id, q.floor, q.target, q.stretch
