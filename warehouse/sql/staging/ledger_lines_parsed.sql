-- staging.ledger_lines_parsed
-- Grain: one row per record in raw.ledger_lines (every load, accepted or not). Key: load_id, source_line.
-- Reads: raw.ledger_lines.
-- Materialized: view
-- The one place a ledger text field is parsed into a typed value. Reconciliation sums amount_value,
-- validation checks the _value columns, staging.transactions keeps them. A value that does not parse is
-- null here; the expectation suite decides whether that quarantines the record.

with

lines as (
    select * from raw.ledger_lines
),

final as (
    select
        lines.*,
        try_cast(lines.amount as decimal(18, 2)) as amount_value,
        try_strptime(lines.booking_date, '%Y-%m-%d')::date as booking_date_value,
        try_cast(lines.balance_after as decimal(18, 2)) as balance_after_value,
        split_part(lines.bank_txn_code, '/', 1) as btc_domain,
        split_part(lines.bank_txn_code, '/', 2) as btc_family,
        split_part(lines.bank_txn_code, '/', 3) as btc_subfamily
    from lines
)

select * from final
