-- intermediate.payroll_credits
-- Grain: one row per (customer_id, payer_id, booking_date) of pay or pension credits. Key: those three.
-- Reads: intermediate.received_credits, intermediate.payers.
-- Parameters: $min_payer_customers, $pensions_observed.
-- Scope: per customer (built per bucket of customers; intermediate.payers is handed whole).
-- A credit (intermediate.received_credits) is pay when the payer coded it as salary (is_coded), or when
-- it is an uncoded received credit transfer from a payer that is an employer: one that codes salary to
-- someone in the window, or that sends such uncoded transfers to at least $min_payer_customers customers
-- (a lodger, a relative or the customer's own account elsewhere pays one customer). Not pay: anything
-- with another purpose code (pension, benefit, interest, rent, refund…), card and cash credits, internal
-- book transfers, and transfers from the customer's own accounts here.
-- Whether uncoded pay arrives on a schedule is decided by intermediate.salary_streams.
-- Pensions (purpose PENS) are read the same way, as their own streams (income_kind 'pension', payer_id
-- prefixed 'pension:'), when $pensions_observed: published as observed income, never a salary label.
-- Credits from one payer on one day are one payment (a salary split in two, or paid with a same-day
-- bonus); credit_count keeps how many there were.

with

credits as (
    select * from intermediate.received_credits
),

payers as (
    select * from intermediate.payers
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
