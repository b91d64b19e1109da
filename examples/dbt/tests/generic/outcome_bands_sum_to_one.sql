{% test outcome_bands_sum_to_one(model, column_name, cuts) %}
-- Rows whose stored outcome's bands at the given cuts leave [0, 1] or miss 1 by over 1e-9.
SELECT *
FROM (SELECT outcome_bands({{ column_name }}, {{ cuts }}) AS bands FROM {{ model }})
WHERE list_min(bands) < 0 OR list_max(bands) > 1 OR abs(list_sum(bands) - 1) > 1e-9
{% endtest %}
