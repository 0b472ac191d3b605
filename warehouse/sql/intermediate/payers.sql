-- intermediate.payers
-- Grain: one row per counterparty that sent a credit in the salary window. Key: counterparty_id.
-- Reads: intermediate.received_credits.
-- Whether a payer is an employer, judged across the whole bank: it codes salary to someone, or it sends
-- uncoded credit transfers to several customers (intermediate.payroll_credits applies the threshold).

with

credits as (
    select * from intermediate.received_credits
),

final as (
    select
        counterparty_id,
        bool_or(is_coded) as codes_salary,
        count(distinct customer_id) filter (where is_uncoded_transfer)::bigint as uncoded_customer_count
    from credits
    where counterparty_id is not null
    group by counterparty_id
)

select * from final
