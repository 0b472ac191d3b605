-- published.band_summary_history (rows of one snapshot)
-- Grain: one row per (income_band, home_region, band_source) in the run.
-- Reads: published.income_bands_history, features.customer.
-- Parameters: $run_id.

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
        count(*)::bigint as customer_count
    from snapshot
    left join regions on regions.customer_id = snapshot.customer_id
    group by all
)

select * from final
