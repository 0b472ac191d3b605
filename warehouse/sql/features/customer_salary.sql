-- features.customer_salary
-- Grain: one row per customer with at least one current, classified payroll stream (the model's label).
-- Key: customer_id.
-- Reads: intermediate.salary_streams.
-- Several employers add up. Customers without such a stream have no row: the model estimates them.

with

streams as (
    select *
    from intermediate.salary_streams
    where is_current and annual_salary is not null
),

final as (
    select
        customer_id,
        round(sum(annual_salary), 2) as annual_salary,
        count(*)::bigint as stream_count,
        arg_max(pay_frequency, annual_salary) as main_pay_frequency
    from streams
    group by customer_id
)

select * from final
