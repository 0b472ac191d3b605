-- The first gate decision that stopped a run, for the alert that tells its owners why.
-- Grain: one row per stopping decision of the run, the first only. Key: gate, check_name.
-- Reads: published.decisions.
-- Parameters: $run_id.

select
    gate,
    check_name,
    reason
from published.decisions
where run_id = $run_id and decision = 'stop'
order by decided_at
limit 1
