-- Open deals with a usable amount and win probability.
SELECT deal_id, owner_id, region, stage, amount, win_prob, expected_close
FROM {{ ref('pipeline') }}
