-- staging.transactions
-- Grain: one row per txn_id. Key: txn_id.
-- Reads: staging.ledger_transactions.
-- Typed ledger records from accepted loads, minus quarantined records (staging.ledger_transactions). A
-- txn_id sent again in a later accepted file keeps its first booking (earliest load, then lowest line).
-- The monthly run appends new loads to this table rather than rebuilding it
-- (ledgerband.tasks.layers.transactions): it runs this file with `records` reading only the new loads'
-- records whose txn_id is not held yet (sql/queries/layers/transactions_held_again.sql finds those held),
-- so this file is the definition both ways, and the whole rebuild when the history changed.

with

records as not materialized (
    select * from staging.ledger_transactions
),

repeated as (
    -- txn_ids booked more than once (validation quarantines a repeat, so this is a guard): only their
    -- records are ranked, rather than every record of every load
    select records.txn_id
    from records
    group by records.txn_id
    having count(*) > 1
),

first_bookings as (
    select records.*
    from records
    anti join repeated on records.txn_id is not distinct from repeated.txn_id
    union all
    select records.*
    from records
    semi join repeated on records.txn_id is not distinct from repeated.txn_id
    qualify
        row_number() over (
            partition by records.txn_id order by records.loaded_at, records.load_id, records.source_line
        ) = 1
),

final as (
    select * exclude (loaded_at)
    from first_bookings
)

select * from final
