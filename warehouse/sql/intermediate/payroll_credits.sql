-- intermediate.payroll_credits
-- Grain: one row per (customer_id, payer_id, booking_date) of payroll credits. Key: those three.
-- Reads: staging.transactions.
-- Parameters: $window_start, $window_end (dates, inclusive).
-- A credit is payroll when the payer marked it as salary: ISO 20022 purpose code SALA or bank
-- transaction sub-family SALA. Credits from one payer on one day are one payment: a salary split in two,
-- or paid with a same-day extra, is one payment.

with

transactions as (
    select *
    from staging.transactions
    where booking_date between $window_start and $window_end
),

coded as (
    select *
    from transactions
    where direction = 'CRDT' and (purpose_code = 'SALA' or btc_subfamily = 'SALA')
),

final as (
    select
        customer_id,
        coalesce(counterparty_id, 'payer not given') as payer_id,
        booking_date,
        sum(amount) as amount
    from coded
    group by all
)

select * from final
