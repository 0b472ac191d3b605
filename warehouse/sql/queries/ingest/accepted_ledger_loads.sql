-- Each accepted load of a dataset with when it was loaded and how many of its records are quarantined
-- now: what a table derived from accepted loads (staging.transactions, ops.accepted_txn_ids) compares
-- with the loads it holds.
-- Grain: one row per accepted load. Key: load_id.
-- Reads: ops.loads, quarantine.ledger_lines.
-- Parameters: $dataset, $status.

select
    loads.load_id,
    loads.loaded_at,
    count(q.load_id)::bigint as quarantined
from ops.loads as loads
left join quarantine.ledger_lines as q on q.load_id = loads.load_id
where loads.dataset = $dataset and loads.status = $status
group by loads.load_id, loads.loaded_at
