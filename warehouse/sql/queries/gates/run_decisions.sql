-- A run's gate decisions in the order they were taken: for ops.runs, the status listing and the run's
-- Prefect page.
-- Grain: one row per decision of the run. Key: gate, check_name, subject.
-- Reads: published.decisions.
-- Parameters: $run_id.

select
    gate,
    check_name,
    subject,
    decision,
    reason,
    figures
from published.decisions
where run_id = $run_id
order by decided_at
