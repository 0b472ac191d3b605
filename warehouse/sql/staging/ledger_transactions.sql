-- staging.ledger_transactions
-- Grain: one row per record of an accepted ledger load that was not quarantined. Key: load_id,
-- source_line.
-- Reads: staging.ledger_lines_parsed, quarantine.ledger_lines, ops.loads.
-- Materialized: view
-- The typed, renamed records staging.transactions chooses from (it keeps each txn_id's first booking).
-- Typing is done once, in staging.ledger_lines_parsed; this file only selects and renames. loaded_at
-- (when the record's load came) orders bookings of one txn_id.

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
        source_line,
        loaded_at
    from kept
)

select * from final
