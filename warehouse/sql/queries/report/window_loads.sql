-- The ledger loads of the run's window as the report lists them: what came, what was kept, the share
-- quarantined and how each file was decided.
-- Grain: one row per ledger load of the window's months. Key: one load each (its load_id is not shown).
-- Reads: ops.loads.
-- Parameters: $window.

select
    source_file,
    period,
    rows_in_file,
    rows_loaded,
    rows_quarantined,
    status,
    reason,
    case when rows_in_file > 0 then rows_quarantined / rows_in_file end as quarantined_share
from ops.loads
where dataset = 'ledger' and period in (select unnest($window::varchar[]))
order by period, loaded_at
