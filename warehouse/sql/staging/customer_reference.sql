-- staging.customer_reference
-- Grain: one row per record of the current customer reference file. Key: source_line.
-- Reads: raw.customers, ops.loads.
-- Materialized: view
-- The customer reference file most recently handed in is the current one (a file sent again is not
-- loaded twice but becomes current again). Validation reads this view (is a ledger's customer_id in
-- the reference file?), staging.customers types it.

with

latest_load as (
    select load_id
    from ops.loads
    where dataset = 'customers' and status = 'accepted'
    order by coalesce(last_seen_at, loaded_at) desc, loaded_at desc, load_id desc
    limit 1
),

final as (
    select records.*
    from raw.customers as records
    inner join latest_load on latest_load.load_id = records.load_id
    where records.customer_id is not null
)

select * from final
