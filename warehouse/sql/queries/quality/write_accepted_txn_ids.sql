-- Writes the keys of ops.accepted_txn_ids for the given accepted loads. The definition of that table: the
-- txn_ids of the records of accepted ledger loads that were not quarantined (tasks/quality/
-- accepted_txn_ids.py keeps it in line with ops.loads).
-- Grain: one written row per such record with a txn_id. Key: load_id, txn_id.
-- Reads: raw.ledger_lines, quarantine.ledger_lines.
-- Writes: ops.accepted_txn_ids.
-- Parameters: $loads.

insert into ops.accepted_txn_ids
select
    r.txn_id,
    r.load_id
from raw.ledger_lines as r
anti join quarantine.ledger_lines as q on q.load_id = r.load_id and q.source_line = r.source_line
where r.load_id in (select unnest($loads)) and r.txn_id is not null
