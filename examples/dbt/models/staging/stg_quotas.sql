-- The quota bands of the period the project reads (var period).
SELECT owner_id, floor, target, stretch
FROM {{ ref('quota_bands') }}
WHERE period IS NULL OR period = '{{ var("period") }}'
