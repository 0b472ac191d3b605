-- One verified incomes load's records as received, with the helper columns its suite's rules read
-- (their meaning is in expectations/verified_incomes.json, meta.derived_columns). tasks/quality/verified.py
-- hands it to GX whole (the file holds at most a row per customer), or tasks/quality/pushdown.py wraps it
-- with the predicates it generates from the suite.
-- Grain: one row per record of the load. Key: source_line.
-- Reads: raw.verified_incomes, staging.customer_reference.
-- Parameters: $load_id.

with

records as (
    select *
    from raw.verified_incomes
    where load_id = $load_id
),

reference as (
    select distinct customers.customer_id
    from staging.customer_reference as customers
),

final as (
    select
        records.source_line,
        records.customer_id,
        records.verified_on,
        records.annual_net_income,
        records.currency,
        records.source,
        records.customer_id is null or reference.customer_id is not null as customer_in_reference,
        case
            when records.verified_on is not null
                then try_strptime(records.verified_on, '%Y-%m-%d') is not null
        end as verified_on_is_date,
        try_strptime(records.verified_on, '%Y-%m-%d')::date as verified_on_value,
        try_cast(records.annual_net_income as decimal(18, 2)) as annual_net_income_value
    from records
    left join reference on reference.customer_id = records.customer_id
)

select * from final
order by source_line
