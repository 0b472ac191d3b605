-- published.band_summary_history (rows of one snapshot)
-- Grain: one row per (income_band, home_region, band_source) in the run.
-- Reads: published.income_bands_history, features.customer.
-- Parameters: $run_id, $min_cell_customers.
-- customer_count is exact here; `suppressed` marks cells under $min_cell_customers, which readers see
-- as null (ledgerband.tasks.publish.snapshot.READER_TABLES).

with

snapshot as (
    select *
    from published.income_bands_history
    where run_id = $run_id
),

regions as (
    select
        customer_id,
        home_region
    from features.customer
),

final as (
    select
        snapshot.run_id,
        snapshot.period,
        snapshot.income_band,
        coalesce(regions.home_region, 'unknown') as home_region,
        snapshot.band_source,
        count(*)::bigint as customer_count,
        count(*) < $min_cell_customers as suppressed
    from snapshot
    left join regions on regions.customer_id = snapshot.customer_id
    group by all
)

select * from final
