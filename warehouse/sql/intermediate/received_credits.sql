-- intermediate.received_credits
-- Grain: one row per credit posting in the salary window. Key: txn_id.
-- Reads: staging.transactions.
-- Parameters: $salary_window_start, $window_end (dates, inclusive).
-- Every credit a customer received in the salary window, with what intermediate.payroll_credits needs to
-- tell pay from the rest:
--   is_coded             the payer coded it as salary: ISO 20022 purpose SALA, or bank transaction
--                        sub-family SALA when there is no purpose code (a pension sent with sub-family
--                        SALA is a pension)
--   is_pension           purpose PENS
--   is_uncoded_transfer  an uncoded received credit transfer (family RCDT, not an internal book transfer)
--                        from a counterparty that is not one of the customer's own accounts here
-- Built for all customers at once: intermediate.payers counts a payer's customers across the bank.

with

transactions as (
    select *
    from staging.transactions
    where booking_date between $salary_window_start and $window_end
),

own_accounts as (
    select distinct
        customer_id,
        account_id
    from staging.transactions
),

final as (
    select
        transactions.txn_id,
        transactions.customer_id,
        transactions.counterparty_id,
        transactions.booking_date,
        transactions.amount,
        coalesce(
            transactions.purpose_code = 'SALA'
            or (transactions.purpose_code is null and transactions.btc_subfamily = 'SALA'),
            false
        ) as is_coded,
        coalesce(transactions.purpose_code = 'PENS', false) as is_pension,
        transactions.purpose_code is null
        and transactions.btc_family = 'RCDT'
        and transactions.btc_subfamily <> 'BOOK'
        and transactions.counterparty_id is not null
        and own_accounts.account_id is null as is_uncoded_transfer
    from transactions
    left join own_accounts
        on
            own_accounts.customer_id = transactions.customer_id
            and own_accounts.account_id = transactions.counterparty_id
    where transactions.direction = 'CRDT'
)

select * from final
