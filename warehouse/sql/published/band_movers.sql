-- published.band_movers_history (rows of one snapshot)
-- Grain: one row per (from_band, to_band, band_source) between the previous published month and this one.
-- Reads: published.income_bands_history, published.snapshots.
-- Parameters: $run_id, $period, $min_cell_customers.
-- The previous month is the latest published snapshot of an earlier period; none: no rows. A customer
-- new since then has from_band 'none'; one gone has to_band and band_source 'none'. customer_count is
-- exact here; readers see suppressed cells as null.

with

previous_run as (
    select
        run_id,
        period
    from published.snapshots
    where period < $period
    order by period desc, published_at desc
    limit 1
),

now_rows as (
    select
        customer_id,
        income_band,
        band_source
    from published.income_bands_history
    where run_id = $run_id
),

then_rows as (
    select
        history.customer_id,
        history.income_band
    from published.income_bands_history as history
    inner join previous_run on previous_run.run_id = history.run_id
),

moves as (
    select
        coalesce(then_rows.income_band, 'none') as from_band,
        coalesce(now_rows.income_band, 'none') as to_band,
        coalesce(now_rows.band_source, 'none') as band_source
    from now_rows
    full outer join then_rows on then_rows.customer_id = now_rows.customer_id
),

final as (
    select
        $run_id as run_id,
        $period as period,
        (select previous_run.period from previous_run) as previous_period,
        moves.from_band,
        moves.to_band,
        moves.band_source,
        count(*)::bigint as customer_count,
        count(*) < $min_cell_customers as suppressed
    from moves
    where exists (select 1 from previous_run)
    group by all
)

select * from final
