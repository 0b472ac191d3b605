-- staging.customers
-- Grain: one row per customer_id. Key: customer_id.
-- Reads: staging.customer_reference.
-- Typed customers of the current reference file (staging.customer_reference); a customer listed twice
-- in it keeps the later line. sex and birth_date are protected attributes: kept for error-by-group
-- analysis, never model features unless settings allow it after review.

with

lines as (
    select * from staging.customer_reference
),

final as (
    select
        customer_id,
        try_cast(birth_date as date) as birth_date,
        sex,
        home_region,
        try_cast(opened_date as date) as opened_date,
        load_id,
        source_line
    from lines
    qualify row_number() over (partition by customer_id order by source_line desc) = 1
)

select * from final
