-- staging.transactions
-- Grain: one row per txn_id. Key: txn_id.
-- Reads: raw.ledger_lines, quarantine.ledger_lines, ops.loads.
-- Typed ledger records from accepted loads, minus quarantined records. A txn_id sent again in a later
-- accepted file keeps its first booking (earliest load, then lowest line).
-- is_payroll_coded: the payer marked the credit as salary (ISO 20022 purpose SALA or bank transaction
-- sub-family SALA).

with

accepted_loads as (
    select load_id, loaded_at
    from ops.loads
    where dataset = 'ledger' and status = 'accepted'
),

lines as (
    select lines.*, accepted_loads.loaded_at
    from raw.ledger_lines as lines
    inner join accepted_loads on accepted_loads.load_id = lines.load_id
),

kept as (
    select lines.*
    from lines
    anti join quarantine.ledger_lines as q
        on q.load_id = lines.load_id and q.source_line = lines.source_line
),

typed as (
    select
        txn_id,
        account_id,
        customer_id,
        cast(booking_date as date) as booking_date,
        cast(amount as decimal(18, 2)) as amount,
        direction,
        currency,
        cast(balance_after as decimal(18, 2)) as balance_after,
        bank_txn_code,
        split_part(bank_txn_code, '/', 1) as btc_domain,
        split_part(bank_txn_code, '/', 2) as btc_family,
        split_part(bank_txn_code, '/', 3) as btc_subfamily,
        purpose_code,
        counterparty_id,
        merchant_category,
        merchant_region,
        coalesce(
            direction = 'CRDT' and (purpose_code = 'SALA' or split_part(bank_txn_code, '/', 3) = 'SALA'), false
        ) as is_payroll_coded,
        load_id,
        source_file,
        source_line,
        loaded_at
    from kept
),

final as (
    select * exclude (loaded_at)
    from typed
    qualify row_number() over (partition by txn_id order by loaded_at, load_id, source_line) = 1
)

select * from final
