-- Each region's outcome merged from the stored owner outcomes (no deal is read again),
-- with the region's summed quota bands as cuts.
SELECT o.region, count(*) AS owners, sum(q.floor) AS floor, sum(q.target) AS target,
       sum(q.stretch) AS stretch, outcome_merge(o.outcome) AS outcome
FROM {{ ref('owner_outcomes') }} AS o
JOIN {{ ref('stg_quotas') }} AS q USING (owner_id)
GROUP BY o.region
