-- staging.customers
-- Grain: one row per customer_id. Key: customer_id.
-- Reads: raw.customers, ops.loads.
-- The customer reference file most recently handed in is the current one (a file sent again is not
-- loaded twice but becomes current again); a customer listed twice in it keeps the later line. sex and
-- birth_date are protected attributes: kept for error-by-group analysis, never model features unless
-- settings allow it after review.

with

latest_load as (
    select load_id
    from ops.loads
    where dataset = 'customers' and status = 'accepted'
    order by coalesce(last_seen_at, loaded_at) desc, loaded_at desc, load_id desc
    limit 1
),

lines as (
    select records.*
    from raw.customers as records
    inner join latest_load on latest_load.load_id = records.load_id
    where records.customer_id is not null
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
