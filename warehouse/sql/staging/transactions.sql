-- staging.transactions
-- Grain: one row per txn_id. Key: txn_id.
-- Reads: staging.ledger_lines_parsed, quarantine.ledger_lines, ops.loads.
-- Typed ledger records from accepted loads, minus quarantined records. A txn_id sent again in a later
-- accepted file keeps its first booking (earliest load, then lowest line). Typing is done once, in
-- staging.ledger_lines_parsed; this file only selects and renames.

with

accepted_loads as (
    select
        load_id,
        loaded_at
    from ops.loads
    where dataset = 'ledger' and status = 'accepted'
),

lines as (
    select
        parsed.*,
        accepted_loads.loaded_at
    from staging.ledger_lines_parsed as parsed
    inner join accepted_loads on accepted_loads.load_id = parsed.load_id
),

kept as (
    select lines.*
    from lines
    anti join quarantine.ledger_lines as q
        on q.load_id = lines.load_id and q.source_line = lines.source_line
),

repeated as (
    -- txn_ids booked more than once (validation quarantines a repeat, so this is a guard): only their
    -- records are ranked, rather than every record of every load
    select kept.txn_id
    from kept
    group by kept.txn_id
    having count(*) > 1
),

first_bookings as (
    select kept.*
    from kept
    anti join repeated on repeated.txn_id is not distinct from kept.txn_id
    union all
    select kept.*
    from kept
    semi join repeated on repeated.txn_id is not distinct from kept.txn_id
    qualify
        row_number() over (partition by kept.txn_id order by kept.loaded_at, kept.load_id, kept.source_line)
        = 1
),

final as (
    select
        txn_id,
        account_id,
        customer_id,
        booking_date_value as booking_date,
        amount_value as amount,
        direction,
        currency,
        balance_after_value as balance_after,
        bank_txn_code,
        btc_domain,
        btc_family,
        btc_subfamily,
        purpose_code,
        counterparty_id,
        merchant_category,
        merchant_region,
        load_id,
        source_file,
        source_line
    from first_bookings
)

select * from final
