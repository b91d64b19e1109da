-- A dated snapshot of every owner's band odds, appended once per as_of (the nightly job,
-- the dbt way): dbt build --vars '{as_of: 2026-12-01}'.
{{ config(materialized='incremental', incremental_strategy='append') }}
SELECT DATE '{{ var("as_of") }}' AS as_of, owner_id, floor, target, stretch, bands, odds_error
FROM {{ ref('owner_odds') }}
{% if is_incremental() %}
WHERE DATE '{{ var("as_of") }}' NOT IN (SELECT as_of FROM {{ this }})
{% endif %}
