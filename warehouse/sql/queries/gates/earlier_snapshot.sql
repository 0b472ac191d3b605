-- The latest published snapshot of a month before the run's: what the drift gate compares with.
-- Grain: one row per snapshot, the latest only. Key: run_id.
-- Reads: published.snapshots.
-- Parameters: $period.

select
    run_id,
    period,
    model_version
from published.snapshots
where period < $period
order by period desc, published_at desc
limit 1
