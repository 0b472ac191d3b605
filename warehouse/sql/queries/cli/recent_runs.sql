-- The most recent runs with their stages and gate figures, newest first (`ledgerband status`).
-- Grain: one row per run, the latest $runs. Key: run_id.
-- Reads: ops.runs.
-- Parameters: $runs.

select
    run_id,
    period,
    started_at,
    status,
    error,
    stages,
    gate_figures
from ops.runs
order by started_at desc
limit $runs
