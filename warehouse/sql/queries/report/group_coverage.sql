-- Held-out interval coverage of the run's estimates by observed band and by group, where measured.
-- Grain: one row per attribute and group with a coverage figure. Key: attribute, group_name.
-- Reads: ml.group_errors.
-- Parameters: $run_id.

select
    attribute,
    group_name,
    coverage,
    customers
from ml.group_errors
where run_id = $run_id and coverage is not null
order by attribute, group_name
