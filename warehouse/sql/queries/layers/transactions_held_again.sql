-- The new loads' txn_ids that staging.transactions holds already, for the monthly append (tasks/layers/
-- transactions.py): few or none, as validation quarantines a repeated booking. Found in one pass into a
-- temp table, so the held table is hashed once, not once per read of the appended records.
-- Grain: one row per such txn_id. Key: txn_id.
-- Reads: staging.ledger_transactions, staging.transactions.
-- Writes: temp.held_again.
-- Parameters: $new_loads.

create or replace temp table held_again as
select distinct incoming.txn_id
from staging.ledger_transactions as incoming
semi join staging.transactions as staged on staged.txn_id is not distinct from incoming.txn_id
where incoming.load_id in (select unnest($new_loads))
