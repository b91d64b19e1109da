{% test bands_are_probabilities(model, column_name) %}
-- Rows whose band probabilities leave [0, 1] or do not sum to 1 within 1e-9.
SELECT *
FROM {{ model }}
WHERE list_min({{ column_name }}) < 0 OR list_max({{ column_name }}) > 1
   OR abs(list_sum({{ column_name }}) - 1) > 1e-9
{% endtest %}
