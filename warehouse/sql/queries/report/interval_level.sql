-- The nominal level of the run's intervals, as its accuracy decision recorded it.
-- Grain: one row per accuracy decision of the run (one, or none when the gate was not reached). Key: none.
-- Reads: published.decisions.
-- Parameters: $run_id.

select (figures ->> 'interval_level')::double as interval_level
from published.decisions
where run_id = $run_id and gate = 'accuracy' and check_name = 'accuracy'
