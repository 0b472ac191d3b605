-- intermediate.payroll_credits
-- Grain: one row per (customer_id, payer_id, booking_date) of pay or pension credits. Key: those three.
-- Reads: staging.transactions.
-- Parameters: $salary_window_start, $window_end (dates, inclusive), $min_payer_customers,
-- $pensions_observed.
-- A credit is pay when the payer coded it as salary (ISO 20022 purpose SALA, or bank transaction
-- sub-family SALA: is_coded), or when it is an uncoded received credit transfer from a payer that is an
-- employer: one that codes salary to someone in the window, or that sends such uncoded transfers to at
-- least $min_payer_customers customers (a lodger, a relative or the customer's own account elsewhere pays
-- one customer). Not pay: anything with another purpose code (pension, benefit, interest, rent, refund…),
-- card and cash credits, internal book transfers, and transfers from the customer's own accounts here.
-- Whether uncoded pay arrives on a schedule is decided by intermediate.salary_streams.
-- Pensions (purpose PENS) are read the same way, as their own streams (income_kind 'pension', payer_id
-- prefixed 'pension:'), when $pensions_observed: published as observed income, never a salary label.
-- Credits from one payer on one day are one payment (a salary split in two, or paid with a same-day
-- bonus); credit_count keeps how many there were.

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

credits as (
    select
        transactions.customer_id,
        transactions.counterparty_id,
        transactions.booking_date,
        transactions.amount,
        -- a purpose code says what the payer meant; the sub-family only counts when there is none (a
        -- pension sent with sub-family SALA is a pension)
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
),

payers as (
    select
        counterparty_id,
        bool_or(is_coded) as codes_salary,
        count(distinct customer_id) filter (where is_uncoded_transfer) as uncoded_customer_count
    from credits
    where counterparty_id is not null
    group by counterparty_id
),

pay as (
    select
        credits.*,
        'salary' as income_kind
    from credits
    left join payers on payers.counterparty_id = credits.counterparty_id
    where
        credits.is_coded
        or (
            credits.is_uncoded_transfer
            and (payers.codes_salary or payers.uncoded_customer_count >= $min_payer_customers)
        )
    union all
    select
        credits.*,
        'pension' as income_kind
    from credits
    where credits.is_pension and $pensions_observed
),

final as (
    select
        customer_id,
        case when income_kind = 'pension' then 'pension:' else '' end
        || coalesce(counterparty_id, 'payer not given') as payer_id,
        booking_date,
        income_kind,
        sum(amount) as amount,
        count(*)::bigint as credit_count,
        bool_or(is_coded or is_pension) as is_coded
    from pay
    group by all
)

select * from final
