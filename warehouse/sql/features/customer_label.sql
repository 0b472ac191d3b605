-- features.customer_label
-- Grain: one row per customer in the current reference file. Key: customer_id.
-- Reads: staging.customers, intermediate.salary_streams.
-- Scope: per customer (built per bucket of customers).
-- Whether the customer's salary can be read from the pay credits here, and why not when it cannot:
--   labelled     every current stream is classified; several employers add up
--   irregular    a current stream follows no pay calendar (no partial labels: the model estimates them)
--   ambiguous    a current stream fits calendars of different frequencies equally well
--   unsettled    a current stream's last payment changed the amount (a rise, or a one-off: wait a month)
--   ended        pay credits in the window, but none current (a leaver, or a missed run at the end)
--   no_pay       no pay credits in the window
-- label_confidence: high when every stream is coded, complete and explained by three or more payments;
-- medium otherwise (found by recurrence, a missed run, extras, or only two payments).
-- Pension streams (when pensions count as observed income) never make a salary label; a customer's
-- current, classified pensions add up to annual_pension.

with

customers as (
    select customer_id from staging.customers
),

streams as (
    select * from intermediate.salary_streams
    where income_kind = 'salary'
),

pensions as (
    select
        salary_streams.customer_id,
        sum(salary_streams.annual_salary) as annual_pension
    from intermediate.salary_streams
    where
        salary_streams.income_kind = 'pension'
        and salary_streams.is_current
        and salary_streams.status = 'classified'
    group by salary_streams.customer_id
),

per_customer as (
    select
        streams.customer_id,
        count(*)::bigint as all_stream_count,
        count(*) filter (where streams.is_current)::bigint as stream_count,
        count(*) filter (where streams.is_current and streams.status = 'unclassified')::bigint
            as irregular_count,
        count(*) filter (where streams.is_current and streams.status = 'ambiguous')::bigint
            as ambiguous_count,
        count(*) filter (where streams.is_current and streams.status = 'unsettled')::bigint
            as unsettled_count,
        sum(streams.annual_salary) filter (where streams.is_current) as annual_salary,
        sum(streams.bonus_amount) as bonus_amount,
        arg_max(streams.pay_frequency, streams.annual_salary) filter (where streams.is_current)
            as main_pay_frequency,
        bool_and(streams.confidence = 'high') filter (where streams.is_current) as all_high,
        sum(streams.payments_used) filter (where streams.is_current)::bigint as payments_used
    from streams
    group by streams.customer_id
),

decided as (
    select
        customers.customer_id,
        case
            when per_customer.customer_id is null then 'no_pay'
            when per_customer.irregular_count > 0 then 'irregular'
            when per_customer.ambiguous_count > 0 then 'ambiguous'
            when per_customer.unsettled_count > 0 then 'unsettled'
            when per_customer.stream_count = 0 then 'ended'
            else 'labelled'
        end as label_status,
        coalesce(per_customer.stream_count, 0) as stream_count,
        coalesce(per_customer.payments_used, 0) as payments_used,
        per_customer.main_pay_frequency,
        round(per_customer.annual_salary, 2) as annual_salary,
        coalesce(per_customer.bonus_amount, 0) as bonus_amount,
        case when per_customer.all_high then 'high' else 'medium' end as label_confidence,
        round(pensions.annual_pension, 2) as annual_pension
    from customers
    left join per_customer on per_customer.customer_id = customers.customer_id
    left join pensions on pensions.customer_id = customers.customer_id
),

final as (
    select
        decided.customer_id,
        decided.label_status,
        decided.stream_count,
        decided.payments_used,
        case when decided.label_status = 'labelled' then decided.main_pay_frequency end as main_pay_frequency,
        case when decided.label_status = 'labelled' then decided.annual_salary end as annual_salary,
        decided.bonus_amount,
        case when decided.label_status = 'labelled' then decided.label_confidence end as label_confidence,
        decided.annual_pension
    from decided
)

select * from final
