-- Each owner's outcome: the whole distribution of the won total, stored as plain DuckDB types.
SELECT owner_id, any_value(region) AS region, count(*) AS deals,
       outcome_dist(amount, win_prob) AS outcome
FROM {{ ref('stg_pipeline') }}
GROUP BY owner_id
